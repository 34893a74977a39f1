"""What the multi-wheel LQR does under constant sensor offsets, from the device's linear model.

The one-wheel prediction (`sim.studies.runaway.predict_bias_response`) solves for the steady state
of the one-wheel loop. Here the same for one to three wheels on a hinge or a ball
(`sim.model.linear3d`, the law of `sim.strategies.lqr.MultiWheelLqr`), with what a 60 s hold shows
beside it, since a ball's slowest closed-loop mode can take minutes.

The loop. With the discrete model x(k+1) = Ad x(k) + Bd u(k) (zero-order hold at the loop rate)
and the law u = -(G_x x_meas + sum_i G_u,i u_held,i) (K times the delay predictor, folded), a
constant offset d on the measured state, x_meas = x(t - delay) + d, enters the predicted present
state as Ad^n Phi_f d, because the predictor is exact on the linear model; so the closed loop is

    x(k+1) = (Ad - Bd K) x(k) - Bd G_x d                       (G_x = K Ad^n Phi_f)

(Franklin, Powell & Workman, Digital Control of Dynamic Systems, ch. 8 for the state feedback,
section from memory; the folding is `sim.strategies.lqr_design.DelayPredictor.folded_gains`).
The offsets d: the angle bias of each tilt axis (the hold's), the rate gyro's bias on every
measured body rate (`sensors.rate_gyro.bias`), and an angle encoder's floor quantisation, whose
mean error is -q/2 for q = 2 pi / counts (`sim.physics.sensors` floors to whole counts: a uniform
error on [-q, 0) for a body that moves at all; common practice, no source). A bearing's Coulomb
torque T_c opposes the wheel's motion at a steady speed; since B's wheel column is the wheel-row
torque per volt (k_t / R, the body row taking none: an internal torque), it is a voltage offset
of -T_c sign(w) R / k_t on that wheel (with a current-mode drive a current offset of
-T_c sign(w) / k_t, B's column being k_t per amp), with the sign of the wheel's steady speed found
first without it.

Steady state: (I - A_cl) x = f, with the conserved combinations C x = 0 (`lqr_design.
conserved_directions`: the loop cannot move them, and a hold starts from rest), solved by least
squares and accepted when the loop's poles (`LqrDesign.poles_discrete`, on the rest of the state)
lie inside the unit circle. The hold: the loop from rest over `hold_s`, each wheel's drift fitted
over its last third as the simulated hold's is (`sim.studies.runaway.fit_drift`), and then on to
`horizon_s` in 1 s strides for the time each wheel first reaches its no-load speed.
Not in the model: gyroscopic terms (second order about rest), the drive's voltage and current
limits, sensor noise, Coulomb friction at the pivot.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .runaway import fit_drift, linear_law_of

STRIDE_S = 1.0          # the step of the search for the time at the limit past the hold, s (our choice)
STEADY_REL = 1e-9       # the response counts as steady within this share of the steady state (our choice)


@dataclass(frozen=True)
class WheelPrediction:
    """One wheel under the offsets (SI): `steady_speed_rad_s`, the final wheel speed;
    `drift_rad_s2`, the slope of the linear response over the hold's last third (what the simulated
    hold's fit measures); `limit_time_s`, when the response first reaches `limit_rad_s` (None: not
    within the horizon)."""

    wheel: int
    steady_speed_rad_s: float
    drift_rad_s2: float
    limit_rad_s: float
    limit_time_s: float | None


@dataclass(frozen=True)
class BiasPrediction3D:
    """The linear loop's answer to one hold's offsets.

    `offsets`: the measured-state offset d by state name (rad, rad/s); `steady_tilt_rad`: the true
    angles at the steady state (state order); `slowest_time_constant_s`: -T / ln|z| of the loop's
    slowest pole; `wheels`: one `WheelPrediction` each; `basis`: how it was found, in words;
    `horizon_s`: how far the time at the limit was looked for.
    """

    offsets: dict
    steady_tilt_rad: tuple[float, ...]
    slowest_time_constant_s: float
    wheels: tuple[WheelPrediction, ...]
    basis: str
    horizon_s: float

    def for_wheel(self, wheel: int):
        """The one-wheel form (`sim.studies.runaway.BiasResponse`) for wheel `wheel` (from 1), which
        the hold notes and summaries print: its steady offset and its drift over the hold's window."""
        from .runaway import BiasResponse
        w = self.wheels[wheel - 1]
        at_limit = (f"never reaching its no-load speed within {self.horizon_s:.0f} s" if w.limit_time_s is None
                    else f"reaching its no-load speed at {w.limit_time_s:.0f} s")
        return BiasResponse("offset", f"{self.basis}; {at_limit}", wheel_speed_rad_s=w.steady_speed_rad_s,
                            angle_rad=self.steady_tilt_rad[0], wheel_accel_rad_s2=w.drift_rad_s2)


def measurement_offsets(sc, device, *, angle_bias_rad) -> np.ndarray:
    """d per state of the device's linear model: each tilt axis's angle bias (`angle_bias_rad`, in
    state order) plus the encoder's mean quantisation error, the gyro bias on each body rate."""
    model = device.linear_spec().linear_model()
    gyro = sc.sensors.rate_gyro.bias if sc.sensors.rate_gyro is not None else 0.0
    q = 2.0 * math.pi / device.angle_counts_per_rev if device.angle_counts_per_rev else 0.0
    d, j = np.zeros(len(model.state_names)), 0
    for i, name in enumerate(model.state_names):
        if name in ("angle", "tilt_x", "tilt_y"):
            d[i] = float(angle_bias_rad[j]) - q / 2.0
            j += 1
        elif not name.endswith("_speed"):
            d[i] = gyro
    return d


def predict_bias_response3d(sc, device, *, angle_bias_rad, hold_s: float, horizon_s: float) -> BiasPrediction3D | None:
    """The steady state and the hold of the built-in LQR under the offsets (module docstring), or None
    when the balance law is not `lqr` or its loop is not stable."""
    law = linear_law_of(sc.strategy)
    if law.kind != "lqr":
        return None
    strategy = law.build(device, rng=np.random.default_rng(0))
    design = strategy.design
    if not np.all(np.abs(design.poles_discrete) < 1.0):
        return None
    G_x, _ = strategy.predictor.folded_gains(strategy.K)
    d = measurement_offsets(sc, device, angle_bias_rad=angle_bias_rad)
    A_cl = design.Ad - design.Bd @ strategy.K
    f = -design.Bd @ (G_x @ d)
    C = design.conserved if design.conserved is not None else np.zeros((0, len(d)))
    x_ss = _steady(A_cl, f, C)
    wheel_rows = [i for i, n in enumerate(design.state_names) if n.endswith("_speed")]
    # a bearing's Coulomb torque: a voltage offset against the wheel's steady motion (module docstring),
    # or with a current-mode drive a current offset, -T_c sign(w) / k_t
    current = getattr(device, "drive_mode", "voltage") == "current"
    friction = np.array([-w.coulomb_n_m * np.sign(x_ss[r]) * (1.0 if current else w.resistance_ohm) / w.k_t_n_m_a
                         for w, r in zip(device.wheels, wheel_rows)])
    if np.any(friction):
        f = f + design.Bd @ friction
        x_ss = _steady(A_cl, f, C)
    T = design.period_s
    limits = [w.no_load_speed_rad_s for w in device.wheels]
    t, speeds, times = _hold(A_cl, f, x_ss, wheel_rows, limits, T, hold_s=hold_s, horizon_s=horizon_s)
    wheels = tuple(WheelPrediction(wheel=i + 1, steady_speed_rad_s=float(x_ss[r]),
                                   drift_rad_s2=fit_drift(t, speeds[:, i]).slope_rad_s2,
                                   limit_rad_s=limits[i], limit_time_s=times[i])
                   for i, r in enumerate(wheel_rows))
    slowest = float(np.max(np.abs(design.poles_discrete)))
    angles = tuple(float(x_ss[i]) for i, n in enumerate(design.state_names) if n in ("angle", "tilt_x", "tilt_y"))
    return BiasPrediction3D(
        offsets={n: float(v) for n, v in zip(design.state_names, d) if v},
        steady_tilt_rad=angles, slowest_time_constant_s=-T / math.log(slowest) if slowest > 0 else 0.0,
        wheels=wheels, horizon_s=horizon_s, basis="final value of the discrete multi-wheel LQR loop on the linear model"
                             + ((", bearing Coulomb torque as a current offset" if current else
                                 ", bearing Coulomb torque as a voltage offset") if np.any(friction) else ""))


def _steady(A_cl: np.ndarray, f: np.ndarray, C: np.ndarray) -> np.ndarray:
    """x with (I - A_cl) x = f and C x = 0 (least squares; the conserved rows make it square)."""
    n = len(f)
    M = np.vstack([np.eye(n) - A_cl, C])
    x, *_ = np.linalg.lstsq(M, np.concatenate([f, np.zeros(C.shape[0])]), rcond=None)
    return x


def _hold(A_cl, f, x_ss, rows, limits, T, *, hold_s: float, horizon_s: float):
    """The loop from rest: (times over the hold, wheel speeds over the hold (ticks x wheels), the time
    each wheel first reaches its limit or None)."""
    n_hold = int(round(hold_s / T))
    xs = np.zeros((n_hold, len(f)))
    x = np.zeros(len(f))
    for k in range(n_hold):
        xs[k] = x
        x = A_cl @ x + f
    t = np.arange(n_hold) * T
    speeds = xs[:, rows]
    times: list[float | None] = []
    for i, r in enumerate(rows):
        over = np.nonzero(np.abs(speeds[:, i]) >= limits[i])[0]
        times.append(float(t[over[0]]) if over.size else None)
    if all(v is not None for v in times) or hold_s >= horizon_s:
        return t, speeds, times
    # past the hold: strides of STRIDE_S (A^s and the forcing summed over a stride)
    s = max(1, int(round(STRIDE_S / T)))
    A_s = np.linalg.matrix_power(A_cl, s)
    f_s = np.zeros(len(f))
    for _ in range(s):
        f_s = A_cl @ f_s + f
    t_now, scale = n_hold * T, max(float(np.max(np.abs(x_ss))), 1e-300)
    while t_now < horizon_s:
        for i, r in enumerate(rows):
            if times[i] is None and abs(x[r]) >= limits[i]:
                times[i] = t_now
        if all(v is not None for v in times) or float(np.max(np.abs(x - x_ss))) <= STEADY_REL * scale:
            break
        x = A_s @ x + f_s
        t_now += s * T
    return t, speeds, times
