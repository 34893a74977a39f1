"""LQR design for balance about upright, on the device's own linear model.

State x = [angle rad, body rate rad/s, wheel speed rad/s], input = volts, law volts = -K x.
Continuous design: scipy's continuous algebraic Riccati equation. Discrete design: the model
discretised by zero-order hold at the control period (`zoh_discretise`), then the
discrete Riccati equation, so the gains are right for the loop rate, not a continuous
approximation of it. Default weights follow Bryson's rule (Bryson & Ho, Applied Optimal
Control, 1975): Q_ii = 1/x_i,max^2, R = 1/u_max^2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

STATE_NAMES = ("angle", "body_rate", "wheel_speed")
STATE_UNITS = ("rad", "rad/s", "rad/s")


@dataclass(frozen=True)
class LqrDesign:
    A: np.ndarray
    B: np.ndarray
    Ad: np.ndarray
    Bd: np.ndarray
    Q: np.ndarray
    R: float
    K_continuous: np.ndarray
    K_discrete: np.ndarray
    poles_continuous: np.ndarray
    poles_discrete: np.ndarray
    period_s: float


def bryson_weights(device) -> tuple[np.ndarray, float]:
    """Default (Q diagonal, R) by Bryson's rule from the device's own limits.

    Largest acceptable excursions: angle 3 deg; body rate 0.5 rad/s; wheel speed half the
    no-load speed (the other half is kept for disturbances); input the full supply voltage.
    These choices are ours (common practice, no source) and are stated in `wheelbench gains`.
    With a current-mode drive the input is amps and its largest value the drive's current limit
    (`device.command_limit`).
    """
    x_max = np.array([math.radians(3.0), 0.5, 0.5 * device.no_load_speed_rad_s])
    u_max = device.command_limit if getattr(device, "drive_mode", "voltage") == "current" else device.supply_v
    return 1.0 / x_max**2, 1.0 / u_max**2


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


def _solve_lqr(A: np.ndarray, B: np.ndarray, Q: np.ndarray, R: float, T: float) -> LqrDesign:
    from scipy.linalg import solve_continuous_are, solve_discrete_are

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
    """

    def __init__(self, design: LqrDesign, *, delay_s: float):
        from scipy.linalg import expm

        T = design.period_s
        self.n = int(math.floor(delay_s / T + 1e-9))
        frac = delay_s - self.n * T
        A, B = design.A, design.B
        M = expm(np.block([[A, B], [np.zeros((1, 4))]]) * frac)
        self.Phi_f, self.Gam_f = M[:3, :3], M[:3, 3:4].ravel()
        self.Ad, self.Bd = design.Ad, design.Bd.ravel()
        self.active = delay_s > 0
        # command history: u[k-n-1 ... k-1] (the fractional step uses the one before the window);
        # a short Python list: shifting it each tick is cheaper than shifting an array
        self.u = [0.0] * (self.n + 1)

    def present_state(self, x_meas: np.ndarray) -> np.ndarray:
        if not self.active:
            return x_meas
        x = self.Phi_f @ x_meas + self.Gam_f * self.u[0]
        for i in range(self.n):
            x = self.Ad @ x + self.Bd * self.u[i + 1]
        return x

    def record(self, volts: float) -> None:
        if self.active:
            del self.u[0]
            self.u.append(float(volts))
