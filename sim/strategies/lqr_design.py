"""LQR design for balance about upright, on the device's own linear model.

One wheel (today's planar `Device`): state x = [angle rad, body rate rad/s, wheel speed rad/s],
input = volts, law volts = -K x, K a 1-D array of 3 gains. Several wheels (anything whose
`linear_spec()` gives a `sim.model.linear3d.LinearSpec`, see `design_lqr_spec`): the state and
inputs that `LinearSpec.linear_model()` names, one voltage per wheel, K an (inputs x states)
matrix; the same Riccati equations with a diagonal input weight.
Continuous design: scipy's continuous algebraic Riccati equation. Discrete design: the model
discretised by zero-order hold at the control period (`zoh_discretise`), then the
discrete Riccati equation, so the gains are right for the loop rate, not a continuous
approximation of it. Default weights follow Bryson's rule (Bryson & Ho, Applied Optimal
Control, 1975): Q_ii = 1/x_i,max^2, R = 1/u_max^2 (R_jj = 1/u_j,max^2 for several inputs).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

STATE_NAMES = ("angle", "body_rate", "wheel_speed")
STATE_UNITS = ("rad", "rad/s", "rad/s")

# Bryson limits (ours, common practice, no source; stated by `wheelbench gains`)
ANGLE_LIMIT_RAD = math.radians(3.0)      # largest acceptable angle or tilt from upright
RATE_LIMIT_RAD_S = 0.5                   # largest acceptable body rate
WHEEL_SPEED_SHARE = 0.5                  # of the no-load speed; the rest is kept for disturbances


@dataclass(frozen=True)
class LqrDesign:
    A: np.ndarray
    B: np.ndarray
    Ad: np.ndarray
    Bd: np.ndarray
    Q: np.ndarray
    R: float | np.ndarray             # a float for today's one-wheel design, else the (inputs x inputs) matrix
    K_continuous: np.ndarray          # 1-D for the one-wheel design, else (inputs x states)
    K_discrete: np.ndarray
    poles_continuous: np.ndarray
    poles_discrete: np.ndarray
    period_s: float
    state_names: tuple[str, ...] = STATE_NAMES
    input_names: tuple[str, ...] = ("voltage",)
    conserved: np.ndarray | None = None   # multi-input: rows c with c x constant whatever the inputs (k x n)

    @property
    def several_inputs(self) -> bool:
        """True for a design from `design_lqr_spec` (matrix gains), False for today's one-wheel design."""
        return np.ndim(self.R) == 2


def bryson_weights(device) -> tuple[np.ndarray, float]:
    """Default (Q diagonal, R) by Bryson's rule from the device's own limits.

    Largest acceptable excursions: angle 3 deg; body rate 0.5 rad/s; wheel speed half the
    no-load speed (the other half is kept for disturbances); input the full supply voltage.
    These choices are ours (common practice, no source) and are stated in `wheelbench gains`.
    With a current-mode drive the input is amps and its largest value the drive's current limit
    (`device.command_limit`).
    """
    x_max = np.array([ANGLE_LIMIT_RAD, RATE_LIMIT_RAD_S, WHEEL_SPEED_SHARE * device.no_load_speed_rad_s])
    u_max = device.command_limit if getattr(device, "drive_mode", "voltage") == "current" else device.supply_v
    return 1.0 / x_max**2, 1.0 / u_max**2


def state_kind(name: str) -> int:
    """0 for an angle or tilt, 1 for a body rate, 2 for a wheel speed (the three kinds of state)."""
    if name in ("angle", "tilt_x", "tilt_y"):
        return 0
    if name.endswith("_speed"):
        return 2
    return 1


def bryson_limits(spec, model) -> tuple[np.ndarray, np.ndarray]:
    """Largest acceptable excursion per state and per input of a multi-wheel design.

    The same rule as `bryson_weights`, per state: angles and tilts 3 deg, body rates 0.5 rad/s,
    each wheel's speed half its own no-load speed; each wheel's voltage its own supply, or with a
    current-mode drive (`spec.drive_mode`) each wheel's current its drive's limit (`command_limit`:
    the current limit, or the stall current at the supply when that is lower).
    """
    wheels = spec.wheels
    x_max = []
    for name in model.state_names:
        kind = state_kind(name)
        if kind == 2:
            index = int(name[len("wheel"):-len("_speed")]) - 1
            x_max.append(WHEEL_SPEED_SHARE * wheels[index].supply_v / wheels[index].k_e_v_s_rad)
        else:
            x_max.append(ANGLE_LIMIT_RAD if kind == 0 else RATE_LIMIT_RAD_S)
    mode = getattr(spec, "drive_mode", "voltage")
    return np.array(x_max), np.array([w.command_limit(mode) for w in wheels], dtype=float)


def spec_weights(spec, model, *, weights=None, effort=None) -> tuple[np.ndarray, np.ndarray]:
    """(Q diagonal, R diagonal) of a multi-wheel design.

    `weights`: None (Bryson's rule, `bryson_limits`), three numbers (one per kind of state: every
    angle or tilt, every body rate, every wheel speed; the one-wheel law's three weights mean the
    same), or one number per state. `effort`: None (Bryson) or one number for every wheel's voltage,
    1/V^2 (or current, 1/A^2, with a current-mode drive).
    """
    x_max, u_max = bryson_limits(spec, model)
    if weights is None:
        q = 1.0 / x_max**2
    else:
        w = np.asarray(weights, dtype=float).ravel()
        if w.size == 3:
            q = w[[state_kind(name) for name in model.state_names]]
        elif w.size == len(model.state_names):
            q = w.copy()
        else:
            raise ValueError(f"weights: give 3 (angles, rates, wheel speeds) or {len(model.state_names)} "
                             f"(one per state: {', '.join(model.state_names)}), found {w.size}")
    r = 1.0 / u_max**2 if effort is None else np.full(len(model.input_names), float(effort))
    return q, r


# Designs already solved in this process, by their exact inputs. A design is a pure function of
# (A, B, Q, R, T); catch maps, push bisections and Monte Carlo runs build the same law hundreds of
# times, and the two Riccati solutions were ~15% of a short trial's time. Cached arrays are made
# read-only, so no caller can change a design another trial shares.
_DESIGNS: dict[bytes, "LqrDesign"] = {}
_DESIGNS_KEPT = 64


def design_lqr(device, *, weights=None, effort=None) -> LqrDesign:
    """Continuous and discrete LQR gains at the device's control rate (solved once per distinct input)."""
    q_default, r_default = bryson_weights(device)
    Q = np.diag(np.asarray(weights if weights is not None else q_default, dtype=float))
    R = float(effort if effort is not None else r_default)
    A, B = device.linear_model()
    T = 1.0 / device.control_rate_hz
    key = b"".join(np.ascontiguousarray(a, dtype=float).tobytes() for a in (A, B, Q, np.array([R, T])))
    design = _DESIGNS.get(key)
    if design is None:
        if len(_DESIGNS) >= _DESIGNS_KEPT:
            _DESIGNS.pop(next(iter(_DESIGNS)))  # the oldest: sweeps move on and rarely come back
        design = _DESIGNS[key] = _solve_lqr(A, B, Q, R, T)
    return design


def design_lqr_spec(spec, *, weights=None, effort=None) -> LqrDesign:
    """Continuous and discrete LQR gains of a multi-wheel device at its control rate.

    `spec`: anything with `linear_model()` (a `sim.model.linear3d.LinearModel`: A, B, state and
    input names), `wheels` (each a `WheelUnit`) and `control_rate_hz`, such as a `LinearSpec`.
    Weights: `spec_weights`. K is (inputs x states); law volts = -K x (amps with `drive_mode` "current").
    Solved once per distinct input, like `design_lqr`.
    """
    model = spec.linear_model()
    q, r = spec_weights(spec, model, weights=weights, effort=effort)
    Q, R = np.diag(q), np.diag(r)
    A, B = model.A, model.B
    T = 1.0 / spec.control_rate_hz
    shapes = np.array(A.shape + B.shape, dtype=float)
    key = b"spec" + b"".join(np.ascontiguousarray(a, dtype=float).tobytes() for a in (shapes, A, B, Q, R, np.array([T])))
    key += "|".join(model.state_names + model.input_names).encode()
    design = _DESIGNS.get(key)
    if design is None:
        if len(_DESIGNS) >= _DESIGNS_KEPT:
            _DESIGNS.pop(next(iter(_DESIGNS)))
        design = _DESIGNS[key] = _solve_lqr(A, B, Q, R, T, state_names=model.state_names,
                                            input_names=model.input_names)
    return design


def _solve_lqr(A: np.ndarray, B: np.ndarray, Q: np.ndarray, R, T: float, **names) -> LqrDesign:
    """The design; `R` a float (today's one-wheel form, 1-D gains) or a matrix (gains inputs x states)."""
    from scipy.linalg import solve_continuous_are, solve_discrete_are

    if np.ndim(R) == 2:
        return _solve_lqr_matrix(A, B, Q, np.array(R, dtype=float), T, **names)
    A, B, Q = (np.array(a, dtype=float) for a in (A, B, Q))
    Ad, Bd = zoh_discretise(A, B, T)
    X = solve_continuous_are(A, B, Q, np.array([[R]]))
    Kc = (B.T @ X) / R
    Xd = solve_discrete_are(Ad, Bd, Q, np.array([[R]]))
    Kd = np.linalg.solve(np.array([[R]]) + Bd.T @ Xd @ Bd, Bd.T @ Xd @ Ad)
    arrays = dict(A=A, B=B, Ad=Ad, Bd=Bd, Q=Q, K_continuous=Kc.ravel(), K_discrete=Kd.ravel(),
                  poles_continuous=np.linalg.eigvals(A - B @ Kc), poles_discrete=np.linalg.eigvals(Ad - Bd @ Kd))
    for a in arrays.values():
        a.setflags(write=False)
    return LqrDesign(R=R, period_s=T, **arrays)


def conserved_directions(A: np.ndarray, B: np.ndarray, *, rcond: float = 1e-9) -> np.ndarray:
    """Rows c (orthonormal, k x n) with c A = 0 and c B = 0: combinations of the state no input and
    no state can change, c x' = 0 (e.g. the angular momentum about the vertical of a body on a
    frictionless ball mount: neither gravity nor the wheels' internal torques have a vertical moment).
    Empty (0 x n) when there are none.

    `rcond`: singular values of [A B] below rcond times the largest count as zero. Nearly conserved
    combinations count too: on the test cube a pivot friction of 1e-11 N m s (relative singular
    value 2e-11) left the Riccati solvers without a solution, 1e-10 still had one; 1e-9 keeps a
    margin and changes nothing a real bearing's friction (1e-6 N m s and up) would show."""
    from scipy.linalg import null_space

    return null_space(np.hstack([A, B]).T, rcond=rcond).T


def _solve_lqr_matrix(A, B, Q, R, T, *, state_names, input_names) -> LqrDesign:
    """The multi-input design. A conserved combination of the state (`conserved_directions`) is an
    uncontrollable mode on the stability boundary, for which no Riccati solution exists; the design
    is then made on the rest of the state (the orthogonal complement N: z = N' x, a subspace the
    model maps into itself) and K = K_z N'. The closed loop leaves the conserved combination as it
    is (the wheels settle at speeds that hold it); the poles reported are those of the rest."""
    from scipy.linalg import null_space, solve_continuous_are, solve_discrete_are

    A, B, Q = (np.array(a, dtype=float) for a in (A, B, Q))
    Ad, Bd = zoh_discretise(A, B, T)
    C = conserved_directions(A, B)
    N = null_space(C) if C.shape[0] else np.eye(A.shape[0])
    Ar, Br, Qr, Adr, Bdr = N.T @ A @ N, N.T @ B, N.T @ Q @ N, N.T @ Ad @ N, N.T @ Bd
    Qr = (Qr + Qr.T) / 2      # symmetric to the last bit
    X = solve_continuous_are(Ar, Br, Qr, R)
    Kc = np.linalg.solve(R, Br.T @ X)
    Xd = solve_discrete_are(Adr, Bdr, Qr, R)
    Kd = np.linalg.solve(R + Bdr.T @ Xd @ Bdr, Bdr.T @ Xd @ Adr)
    arrays = dict(A=A, B=B, Ad=Ad, Bd=Bd, Q=Q, R=R, K_continuous=Kc @ N.T, K_discrete=Kd @ N.T,
                  poles_continuous=np.linalg.eigvals(Ar - Br @ Kc), poles_discrete=np.linalg.eigvals(Adr - Bdr @ Kd),
                  conserved=C)
    for a in arrays.values():
        a.setflags(write=False)
    return LqrDesign(period_s=T, state_names=tuple(state_names), input_names=tuple(input_names), **arrays)


def zoh_discretise(A: np.ndarray, B: np.ndarray, period_s: float) -> tuple[np.ndarray, np.ndarray]:
    """(Ad, Bd) of x' = A x + B u with u held over `period_s` (zero-order hold).

    expm([[A, B], [0, 0]] T) = [[Ad, Bd], [0, I]] (the standard block-matrix form; the same
    method as scipy.signal.cont2discrete's "zoh", whose import alone costs about a second).
    """
    from scipy.linalg import expm

    n, m = A.shape[0], B.shape[1]
    block = np.zeros((n + m, n + m))
    block[:n, :n], block[:n, n:] = A, B
    M = expm(block * period_s)
    return M[:n, :n], M[:n, n:]


class DelayPredictor:
    """Predicts the present state from a delayed measurement with the model and past commands.

    With a measurement delay of n whole control periods plus a fraction f, the present state is
    x(k) = Phi_f Phi^n x_meas + (sum over the commands applied since the measurement was taken).
    Feeding K x(k) is the same law as LQR on the delay-augmented state [x(k-n), u(k-n..k-1)]
    (common practice, no source; see e.g. a discrete Smith predictor). The fraction is handled by
    propagating the continuous model over f*T with the oldest command held.

    Today's one-wheel design keeps 1-D input columns (`Gam_f`, `Bd`) and float commands; a design
    with several inputs (`LqrDesign.several_inputs`) keeps (states x inputs) matrices and one array
    of volts per held command.
    """

    def __init__(self, design: LqrDesign, *, delay_s: float):
        from scipy.linalg import expm

        T = design.period_s
        self.n = int(math.floor(delay_s / T + 1e-9))
        frac = delay_s - self.n * T
        A, B = design.A, design.B
        nx, nu = B.shape
        M = expm(np.block([[A, B], [np.zeros((nu, nx + nu))]]) * frac)
        self.several = design.several_inputs
        self.Phi_f, self.Gam_f = M[:nx, :nx], M[:nx, nx:]
        self.Ad, self.Bd = design.Ad, design.Bd
        if not self.several:
            self.Gam_f, self.Bd = self.Gam_f.ravel(), self.Bd.ravel()
        self.active = delay_s > 0
        # command history: u[k-n-1 ... k-1] (the fractional step uses the one before the window);
        # a short Python list: shifting it each tick is cheaper than shifting an array
        self.u = [np.zeros(nu) if self.several else 0.0 for _ in range(self.n + 1)]

    def present_state(self, x_meas: np.ndarray) -> np.ndarray:
        if not self.active:
            return x_meas
        if self.several:
            x = self.Phi_f @ x_meas + self.Gam_f @ self.u[0]
            for i in range(self.n):
                x = self.Ad @ x + self.Bd @ self.u[i + 1]
            return x
        x = self.Phi_f @ x_meas + self.Gam_f * self.u[0]
        for i in range(self.n):
            x = self.Ad @ x + self.Bd * self.u[i + 1]
        return x

    def record(self, volts) -> None:
        """Remember the command applied this tick: volts (one wheel) or one per input."""
        if self.active:
            del self.u[0]
            self.u.append(np.array(volts, dtype=float).reshape(-1) if self.several else float(volts))

    def folded_gains(self, K: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
        """K times the predictor for a design with several inputs: (G_x, [G_u0, ..., G_un]).

        The predictor is linear, x_now = Ad^n (Phi_f x_meas + Gam_f u0) + sum_i Ad^(n-1-i) Bd u(i+1),
        so K x_now = G_x x_meas + sum_i G_ui u_i (the one-wheel law folds the same way,
        `sim.strategies.lqr.LqrBalance.folded_gains`). Without delay: (K, []).
        """
        if not self.active:
            return np.array(K, dtype=float), []
        powers = [np.eye(self.Ad.shape[0])]
        for _ in range(self.n):
            powers.append(self.Ad @ powers[-1])
        Gam = self.Gam_f.reshape(self.Ad.shape[0], -1)
        Bd = self.Bd.reshape(self.Ad.shape[0], -1)
        G_x = K @ powers[self.n] @ self.Phi_f
        G_u = [K @ powers[self.n] @ Gam] + [K @ powers[self.n - 1 - i] @ Bd for i in range(self.n)]
        return G_x, G_u
