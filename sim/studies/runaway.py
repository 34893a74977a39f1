"""Slow wheel runaway: the wheel's steady drift during a long hold, and when it would hit its limit.

Two halves, both plain functions on numbers (no simulation here):

1. Measurement. `fit_drift` fits a straight line to the wheel speed over the last part of a hold
   (the last third by default, after the catch transient has died out). The series is first
   averaged into equal blocks, so that sensor noise and the loop's fast wobble average out and
   the block means are close to independent; the slope's standard error comes from the
   residuals of the block means (ordinary least squares). `runaway_time_s` extrapolates the
   fitted line to the wheel's speed limit (the no-load speed at the supply).

   "No drift" (value None) is stated as: the slope is within NO_DRIFT_Z standard errors of zero,
   or the extrapolated time lies beyond the caller's horizon (a drift so slow that it would take
   far longer than the run it is judged for). Both choices are ours.

2. Prediction. `predict_bias_response` states what a linear balance law does with a constant
   angle-sensor bias b, from the device's linear model (`Device.linear_model`, x = [angle, body
   rate, wheel speed], volts in):
   - a law whose closed loop has an equilibrium (LQR, which feeds back wheel speed; PD; PID with
     a wheel-speed loop) settles with the wheel at a finite offset. For the discrete loop,
     x(k+1) = Ad x(k) + Bd u(k), the final-value theorem for a step input (Franklin, Powell &
     Workman, Digital Control of Dynamic Systems, 3rd ed., sec. 4.x; section number from memory)
     gives the limit as the solution of the equilibrium equations (Ad - I) x + Bd u = 0 together
     with the law's own steady equation, provided the loop is stable;
   - angle-only PID (integral action on the measured angle, no wheel loop) drives the measured
     angle towards zero, so the true angle sits near -b; gravity's torque mbar g (-b) must then
     come from the wheel's reaction, which needs a constant wheel acceleration of about
     -mbar g b / I_w (the body row of the model with the angle held still, bearing drag
     neglected): the wheel speed grows without bound until the supply runs out. The rising
     back-EMF makes the integral lag, which tilts the body further; `_pid_ramp` gives the exact
     ramp of the linear model.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

FIT_FRACTION = 1.0 / 3.0   # fit over the last third of the hold (our choice)
FIT_BLOCKS = 20            # block means the fit is made on (our choice)
NO_DRIFT_Z = 3.0           # |slope| within 3 standard errors of zero: no drift (our choice)
SETTLING_RATIO = 0.5       # last third's slope below half the middle third's: settling, not drifting (our choice)


@dataclass(frozen=True)
class Drift:
    """A straight-line fit of wheel speed over the end of a hold.

    `slope_rad_s2` and its standard error `slope_se_rad_s2` in rad/s^2; `level_rad_s` the fitted
    wheel speed at `t_end_s` (the last sample's time, s); `mean_rad_s` the mean wheel speed over
    the fitted window; `window_s` (start, end) of the window, s.
    """

    slope_rad_s2: float
    slope_se_rad_s2: float
    level_rad_s: float
    mean_rad_s: float
    t_end_s: float
    window_s: tuple[float, float]

    @property
    def significant(self) -> bool:
        """True when the slope differs from zero by more than NO_DRIFT_Z standard errors."""
        return abs(self.slope_rad_s2) > NO_DRIFT_Z * self.slope_se_rad_s2


def fit_drift(t_s: np.ndarray, wheel_rad_s: np.ndarray, *, fraction: float = FIT_FRACTION,
              blocks: int = FIT_BLOCKS) -> Drift:
    """Fit the wheel speed's steady drift over the last `fraction` of a series.

    Parameters
    ----------
    t_s : sample times, s, increasing.
    wheel_rad_s : wheel speed at those times, rad/s (signed, relative to the body).
    fraction : share of the series, from its end, that is fitted (0 < fraction <= 1).
    blocks : the window is averaged into this many equal blocks before the fit (at least 3).

    Raises ValueError when the window holds fewer samples than blocks.
    """
    t = np.asarray(t_s, dtype=float)
    w = np.asarray(wheel_rad_s, dtype=float)
    if t.shape != w.shape or t.ndim != 1:
        raise ValueError("t_s and wheel_rad_s must be 1-D arrays of the same length")
    if not (0.0 < fraction <= 1.0) or blocks < 3:
        raise ValueError("fraction must be in (0, 1] and blocks at least 3")
    n = len(t)
    start = n - int(math.floor(n * fraction))
    per = (n - start) // blocks
    if per < 1:
        raise ValueError(f"{n - start} samples in the window is fewer than {blocks} blocks")
    start = n - per * blocks                      # whole blocks, ending at the last sample
    tb = t[start:].reshape(blocks, per).mean(axis=1)
    wb = w[start:].reshape(blocks, per).mean(axis=1)
    tc = tb - tb.mean()
    sxx = float(np.sum(tc * tc))
    slope = float(np.sum(tc * (wb - wb.mean())) / sxx)
    intercept = float(wb.mean() - slope * tb.mean())
    resid = wb - (intercept + slope * tb)
    se = math.sqrt(float(np.sum(resid * resid)) / (blocks - 2) / sxx)
    return Drift(slope_rad_s2=slope, slope_se_rad_s2=se, level_rad_s=intercept + slope * float(t[-1]),
                 mean_rad_s=float(w[start:].mean()), t_end_s=float(t[-1]), window_s=(float(t[start]), float(t[-1])))


def settling(middle: Drift, last: Drift) -> bool:
    """True when the wheel is still approaching a level, not drifting: the slope over the last third
    of the hold is below SETTLING_RATIO of the (significant) slope over the middle third, same sign.

    A steady drift (angle-only PID under a bias: a constant wheel acceleration) keeps its slope,
    ratio ~1; a law that settles at a wheel-speed offset approaches it exponentially, and over
    consecutive windows of length T its slope falls by exp(-T / tau) (first-order response, any
    control text): a hold too short for the transient would otherwise read as a runaway.
    """
    if not middle.significant or middle.slope_rad_s2 == 0.0:
        return False
    ratio = last.slope_rad_s2 / middle.slope_rad_s2
    return ratio < SETTLING_RATIO


def runaway_time_s(drift: Drift, *, limit_rad_s: float, horizon_s: float = math.inf) -> float | None:
    """When the fitted line reaches |wheel speed| = `limit_rad_s`, s from the series' time origin.

    None for no drift: the slope is not significant (`Drift.significant`), or the time is beyond
    `horizon_s`. A wheel already at or past the limit gives the window's end time.
    """
    if not drift.significant or drift.slope_rad_s2 == 0.0:
        return None
    target = math.copysign(limit_rad_s, drift.slope_rad_s2)
    t = drift.t_end_s + max(0.0, (target - drift.level_rad_s) / drift.slope_rad_s2)
    return None if t > horizon_s else t


# ----------------------------------------------------------------------------- prediction

@dataclass(frozen=True)
class BiasResponse:
    """What a linear balance law does under a constant angle bias (SI).

    `kind`: "offset" (the wheel settles at `wheel_speed_rad_s`, body at `angle_rad`) or "ramp"
    (the wheel accelerates at `wheel_accel_rad_s2` without bound). `basis` says how it was found.
    """

    kind: str
    basis: str
    wheel_speed_rad_s: float | None = None
    angle_rad: float | None = None
    wheel_accel_rad_s2: float | None = None


def linear_law_of(spec):
    """The balance law's strategy spec that holds the body upright (a supervisor's `balance`), or the spec."""
    balance = getattr(spec.params, "balance", None)
    return balance if balance is not None and hasattr(balance, "cls") else spec


def predict_bias_response(device, spec, *, bias_rad: float) -> BiasResponse | None:
    """The steady state of the balance law in `spec` under a constant angle bias, or None when the
    law is not one of the linear built-ins (`lqr`, `pid`) or its loop has no stable equilibrium."""
    law = linear_law_of(spec)
    A, B = device.linear_model()
    if law.kind == "lqr":
        strategy = law.build(device, rng=np.random.default_rng(0))
        gx, gu = np.array(strategy._gx), float(sum(strategy._gu))
        closed = strategy.design.poles_discrete
        # u = -(gx . (x + b e0)) - gu u  (the delay predictor's held commands are all u in steady state)
        return _equilibrium(A, B, law_row=np.r_[gx, 1.0 + gu], rhs=-gx[0] * bias_rad,
                            stable=bool(np.all(np.abs(closed) < 1.0)),
                            basis="final value of the discrete LQR loop")
    if law.kind == "pid":
        s = law.build(device, rng=np.random.default_rng(0))
        if s.wheel_ki > 0:
            # integral action on wheel speed: the steady state has the wheel at rest
            return _equilibrium(A, B, law_row=np.array([0.0, 0.0, 1.0, 0.0]), rhs=0.0, stable=True,
                                basis="integral action on wheel speed")
        if s.ki > 0 and s.wheel_kp == 0:
            return _pid_ramp(device, ki=s.ki, bias_rad=bias_rad)
        if s.ki > 0:
            # the angle integral zeroes e = angle + bias + wheel_kp * wheel speed
            return _equilibrium(A, B, law_row=np.array([1.0, 0.0, s.wheel_kp, 0.0]), rhs=-bias_rad, stable=True,
                                basis="integral action on the angle error with a wheel loop")
        # PD (+ wheel_kp): u = kp (angle + bias + wheel_kp w) + kd rate
        return _equilibrium(A, B, law_row=np.array([-s.kp, -s.kd, -s.kp * s.wheel_kp, 1.0]), rhs=s.kp * bias_rad,
                            stable=True, basis="final value of the PD loop")
    return None


def _pid_ramp(device, *, ki: float, bias_rad: float) -> BiasResponse:
    """Angle-only PID under a bias b: the steady ramp of the linear model (bearing drag neglected).

    With the body still (angle th constant), the wheel accelerates at a = mbar g th / I_w and the
    volts must rise with the back-EMF, dV/dt = k_e a; the integral gives dV/dt = ki e with the
    measured error e = th + b constant. So ki (th + b) = g_e th, g_e = k_e mbar g / I_w, and
    th = -b ki / (ki - g_e): a = -(mbar g b / I_w) ki / (ki - g_e). For ki <= g_e no steady ramp
    exists: the wheel speed grows faster than linearly (accel None).
    """
    g_e = device.k_e_v_s_rad * device.gravity_torque_coeff_n_m / device.I_w_kg_m2
    basis = "angle-only PID: a = -(mbar g b / I_w) ki / (ki - k_e mbar g / I_w)"
    if ki <= g_e:
        return BiasResponse("ramp", basis + "; ki too small for a steady ramp, it grows faster")
    angle = -bias_rad * ki / (ki - g_e)
    return BiasResponse("ramp", basis, angle_rad=angle,
                        wheel_accel_rad_s2=device.gravity_torque_coeff_n_m * angle / device.I_w_kg_m2)


def _equilibrium(A, B, *, law_row, rhs: float, stable: bool, basis: str) -> BiasResponse | None:
    """Solve A x + B u = 0 (body rate zero) with the law's steady equation law_row . [x, u] = rhs.

    A continuous-time equilibrium is also one of the zero-order-hold discretisation, since
    Ad - I = A M and Bd = M B with M = integral of exp(A s) ds over a period.
    """
    if not stable:
        return None
    # unknowns [angle, body rate, wheel speed, u]; rows: model rows 2 and 3, body rate = 0, the law
    M = np.vstack([np.c_[A[1:], B[1:]], [0.0, 1.0, 0.0, 0.0], law_row])
    if abs(np.linalg.det(M)) < 1e-12 * np.abs(M).max() ** 4:
        return None
    x = np.linalg.solve(M, np.array([0.0, 0.0, 0.0, rhs]))
    return BiasResponse("offset", basis, wheel_speed_rad_s=float(x[2]), angle_rad=float(x[0]))
