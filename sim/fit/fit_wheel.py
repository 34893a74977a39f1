"""Wheel-drive fits with the body held: a voltage step (spin-up) and a coast-down.

Model (../shared/references.md "Motor", inductance neglected; w = wheel speed relative to the
body, rad/s; the body is held, so w is also the wheel's absolute speed):

    V = R i + k_e w                                  (winding)
    I_w w' = k_t i - b w - T_c sign(w)               (wheel: motor torque against bearing friction)

Spin-up, a step to V from rest: w(t) = w_inf + (w_start - w_inf) exp(-(t - t_step)/tau) with
tau = I_w / (k_t k_e / R + b) and w_inf = (k_t V / R - T_c) / (k_t k_e / R + b).
Coast-down, driver off (open winding, no current): I_w w' = -b w - T_c, so
w(t) = w0 exp(-a s) - c s phi(a s) with a = b / I_w, c = T_c / I_w, s = t - t_start and
phi(x) = (1 - exp(-x)) / x, until the wheel stops.

A single spin-up fixes k_t / I_w but not each alone; we take k_t = k_e (an ideal motor: the
electrical power k_e w i equals the mechanical power k_t i w in SI; common practice, no source)
and say so in the notes.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from scipy.optimize import least_squares

from ..core.errors import InputError
from .fitting import (FIT_SAMPLES, FitResult, bin_means, bin_size, covariance, linear_fit, noise_sigma, ratio_sigma,
                      smooth_signal)

MIN_TIME_CONSTANTS = 2.0       # a spin-up log must run this many time constants past the step


def _speed(log, why: str) -> tuple[np.ndarray, np.ndarray, str]:
    w = log.require("wheel_speed_rad_s", why=why)
    return log.t_s, w, f"{log.path}: {log.label('wheel_speed_rad_s')}"


# ----------------------------------------------------------------------------- spin-up

def find_step(t: np.ndarray, v: np.ndarray, *, where: str) -> tuple[int, int, float]:
    """(first sample at the new voltage, one past the last, step voltage V). Raises when there is no step.

    The step level is the median of the samples above half the largest |v|; the step runs from
    the first to the last sample at more than half that level (a voltage switched off again
    later ends the window). A log that starts at the step (no quiet lead-in) is accepted.
    """
    peak = float(np.max(np.abs(v)))
    if peak < 1e-6:
        raise InputError(f"{where}: does not look like a spin-up: no voltage step found (the voltage stays near 0)")
    level = float(np.median(v[np.abs(v) >= 0.5 * peak]))
    on = np.nonzero(np.sign(level) * v >= 0.5 * abs(level))[0]
    i0, i1 = int(on[0]), int(on[-1]) + 1
    if i1 - i0 < 10:
        raise InputError(f"{where}: does not look like a spin-up: the voltage step lasts only {i1 - i0} samples")
    return i0, i1, float(np.mean(v[i0:i1]))


def fit_spin_up(log, *, device=None, scenario=None) -> FitResult:
    """Fit a spin-up log: time constant, final speed, k_e; with current R (and k_t = k_e); with a
    scenario, the wheel's spin inertia."""
    t, w, where = _speed(log, "a spin-up is fitted to the wheel speed")
    v = log.require("voltage_v", why="a spin-up needs the applied voltage")
    i0, i_end, volts = find_step(t, v, where=f"{log.path}: {log.label('voltage_v')}")
    sgn = math.copysign(1.0, volts)  # a negative step is fitted as a positive one, signs restored below
    if i_end < len(t):  # the voltage was switched off again: fit the step's window only
        log = replace(log, t_s=t[:i_end], columns={k: c[:i_end] for k, c in log.columns.items()})
        t, w, v = t[:i_end], w[:i_end], v[:i_end]
    ts, ws = t[i0:] - t[i0], sgn * w[i0:]
    res = FitResult("spin-up")
    res.facts.update({"step_time_s": float(t[i0]), "lead_in_samples": i0, "samples_used": int(len(ts))})
    if i0 == 0:
        res.notes.append("The log starts at the voltage step (no quiet lead-in); the step is taken at the first sample.")
    k = _current_limited(log, i0, sgn)
    if k:
        res.notes.append(f"The drive held the current at its limit for {ts[k]:.3g} s after the step; those samples are "
                         "left out (the response is first order only once the limit lets go).")
        res.facts["current_limited_s"] = float(ts[k])
        res.facts["samples_used"] = int(len(ts) - k)
    expo = _fit_exponential(ts[k:], ws[k:], where=where)
    w_inf, tau = expo["w_inf"], expo["tau"]
    if ts[-1] < MIN_TIME_CONSTANTS * tau:
        raise InputError(f"{where}: the log ends {ts[-1]:.3g} s after the step, only {ts[-1] / tau:.2g} time "
                         f"constants ({tau:.3g} s); log at least {MIN_TIME_CONSTANTS:g} so the final speed shows")
    res.put("step_voltage_v", volts, float(np.std(v[i0:]) / math.sqrt(len(ts))))
    res.put("final_speed_rad_s", sgn * w_inf, expo["w_inf_sigma"])
    res.put("time_constant_s", tau, expo["tau_sigma"])
    res.facts["residual_rms_rad_s"] = expo["rms"]
    _binned_note(res, expo["bin"])
    fitted = t >= t[i0 + k]  # the model is drawn where it was fitted (not over a current-limited start)
    res.plot = {"t_s": t, "data": w, "model": np.where(fitted, sgn * _step_model(t - t[i0], expo["p"]), np.nan),
                "label": "wheel speed [rad/s]", "title": "spin-up"}
    if float(np.std(v[i0:])) > 0.05 * abs(volts):
        res.notes.append(f"The voltage after the step varies ({np.std(v[i0:]):.3g} V rms about {volts:.3g} V); "
                         "its mean is used.")
    if log.has("angle_rad") and np.ptp(log.columns["angle_rad"]) > 0.05:
        res.notes.append("The body angle moved during the log; a spin-up assumes the body is held.")
    k_e, r_ohm = _motor_constants(res, log, i0 + k, sgn, abs(volts), w_inf, expo, device)
    if device is not None:
        _wheel_inertia(res, device, scenario, k_e, r_ohm, tau)
    return res


def _current_limited(log, i0: int, sgn: float) -> int:
    """Samples after the step during which the drive held the current at its limit (0 when none).

    A limited current stays flat at its peak while the wheel gains speed; an unlimited one falls
    as the wheel speeds up (i = (V - k_e w)/R), so a flat peak lasting while the speed rises by
    more than 5% of its final value means a limit.
    """
    if not log.has("current_a"):
        return 0
    i = sgn * log.columns["current_a"][i0:]
    w = sgn * log.columns["wheel_speed_rad_s"][i0:]
    top = float(np.max(i))
    if top <= 0.0:
        return 0
    at_top = i >= top - max(3.0 * noise_sigma(log.t_s[i0:], i), 0.01 * top)
    first = int(np.argmax(at_top))
    off = np.nonzero(~at_top[first:])[0]
    end = first + (int(off[0]) if off.size else len(i) - first)
    final = float(np.median(w[-max(len(w) // 10, 3):]))
    return end if end < len(i) and w[end] - w[first] > 0.05 * abs(final) else 0


def _step_model(s: np.ndarray, p) -> np.ndarray:
    w_inf, w_start, tau = p
    return w_inf + (w_start - w_inf) * np.exp(-s / tau)


def _fit_exponential(s: np.ndarray, w: np.ndarray, *, where: str) -> dict:
    """Least-squares first-order step response; starting guesses from the 63% time."""
    n_tail = max(len(w) // 10, 3)
    w_inf0, w_start0 = float(np.median(w[-n_tail:])), float(w[0])
    sm = smooth_signal(w, len(w) / 200.0)
    sigma = max(noise_sigma(s, w), 1e-12)
    rise = w_inf0 - w_start0
    if rise < max(10.0 * sigma, 1e-6):
        raise InputError(f"{where}: does not look like a spin-up: the wheel speed does not rise after the step")
    crossed = np.nonzero(sm >= w_start0 + 0.632 * rise)[0]
    tau0 = float(s[crossed[0]]) if crossed.size and s[crossed[0]] > 0 else float(s[-1]) / 5.0
    k = bin_size(len(s))   # a long log: fitted to bin means, in bounded memory
    sb, wb = bin_means(s, k), bin_means(w, k)
    fit = least_squares(lambda p: _step_model(sb, p) - wb, [w_inf0, w_start0, max(tau0, 1e-6)],
                        bounds=([-np.inf, -np.inf, 1e-9], np.inf), x_scale="jac")
    cov = covariance(fit)
    sig = np.sqrt(np.diag(cov))
    residual = fit.fun if k == 1 else _step_model(s, fit.x) - w
    rms = float(np.sqrt(np.mean(residual**2)))
    return {"p": fit.x, "w_inf": float(fit.x[0]), "w_inf_sigma": float(sig[0]), "tau": float(fit.x[2]),
            "tau_sigma": float(sig[2]), "rms": rms, "bin": k}


def _motor_constants(res, log, i0, sgn, volts, w_inf, expo, device) -> tuple[float, float | None]:
    """k_e (and R, k_t with current logged). Returns (k_e, R or None)."""
    if log.has("current_a"):
        i = sgn * log.columns["current_a"][i0:]
        w = sgn * log.columns["wheel_speed_rad_s"][i0:]
        v = sgn * log.columns["voltage_v"][i0:]
        # V = R i + k_e w holds at every sample, so friction drops out (the first samples carry L di/dt)
        skip = min(max(3, len(v) // 200), len(v) // 4)
        p, cov, _ = linear_fit(np.column_stack([i[skip:], w[skip:]]), v[skip:])
        r_ohm, k_e = float(p[0]), float(p[1])
        s_r, s_ke = (float(math.sqrt(c)) for c in np.diag(cov))
        res.put("resistance_ohm", r_ohm, s_r)
        res.put("back_emf_constant_v_s_per_rad", k_e, s_ke)
        res.put("torque_constant_n_m_per_a", k_e, s_ke)
        res.notes.append("k_e and R come from V = R i + k_e w over the whole response, so bearing friction does "
                         "not bias them. torque_constant_n_m_per_a is taken equal to k_e (ideal motor): one "
                         "spin-up cannot separate k_t from the wheel's inertia.")
        res.patch = {"motor": {"back_emf_constant": k_e, "torque_constant": k_e, "resistance": r_ohm}}
        return k_e, r_ohm
    rel = math.hypot(expo["w_inf_sigma"] / w_inf, res.values["step_voltage_v"][1] / volts)
    if device is not None and (device.wheel_coulomb_n_m > 0 or device.wheel_viscous_n_m_s > 0):
        # w_inf = (k_e V/R - T_c)/(k_e^2/R + b) with k_t = k_e, solved for k_e (the root near V/w_inf)
        r_ohm, tc, b = device.resistance_ohm, device.wheel_coulomb_n_m, device.wheel_viscous_n_m_s
        disc = volts**2 - 4.0 * w_inf * r_ohm * (b * w_inf + tc)
        if disc <= 0.0:
            raise InputError(f"{log.path}: the scenario's bearing friction and resistance cannot give the fitted final "
                             f"speed {w_inf:.4g} rad/s at {volts:.4g} V; check wheel.bearing_friction and motor.resistance")
        k_e = (volts + math.sqrt(disc)) / (2.0 * w_inf)
        res.notes.append("k_e from the final speed and voltage, with the scenario's bearing friction and resistance.")
    else:
        k_e = volts / w_inf
        res.notes.append("k_e = V / final speed assumes the bearing friction is negligible (no current logged, no "
                         "friction in a --scenario); friction makes this an overestimate.")
    res.put("back_emf_constant_v_s_per_rad", k_e, k_e * rel)
    res.patch = {"motor": {"back_emf_constant": k_e}}
    return k_e, None


def _wheel_inertia(res, device, scenario, k_e, r_ohm, tau) -> None:
    """I_w = tau (k_t k_e / R + b), with k_t = k_e."""
    r_used = r_ohm if r_ohm is not None else device.resistance_ohm
    damping = k_e * k_e / r_used + device.wheel_viscous_n_m_s
    inertia = tau * damping
    rel = [res.values["time_constant_s"][1] / tau, 2.0 * res.values["back_emf_constant_v_s_per_rad"][1] / k_e]
    if r_ohm is not None:
        rel.append(res.values["resistance_ohm"][1] / r_ohm)
    res.put("wheel_spin_inertia_kg_m2", inertia, ratio_sigma(inertia, *rel))
    res.facts["model_wheel_spin_inertia_kg_m2"] = device.I_w_kg_m2
    res.notes.append("The wheel's inertia takes k_t = k_e (ideal motor)" + (
        "." if r_ohm is not None else f" and the scenario's resistance ({r_used:.4g} ohm), taken as exact."))
    res.patch.setdefault("wheel", {})["inertia_correction"] = (scenario.wheel.inertia_correction
                                                               + inertia - device.I_w_kg_m2)


def _binned_note(res: FitResult, k: int) -> None:
    if k > 1:
        res.facts["fit_bin_samples"] = k
        res.notes.append(f"The model was fitted to means of {k} consecutive samples (a long log: at most "
                         f"{FIT_SAMPLES:,} bins, for bounded memory); the residual is over every sample.")


# ----------------------------------------------------------------------------- coast-down

def coast_model(s: np.ndarray, p) -> np.ndarray:
    """w(s) = w0 exp(-a s) - c s phi(a s), phi(x) = (1 - exp(-x))/x (-> 1 as a -> 0)."""
    w0, a, c = p
    x = a * s
    phi = np.where(np.abs(x) > 1e-12, -np.expm1(-x) / np.where(x == 0, 1.0, x), 1.0)
    return w0 * np.exp(-x) - c * s * phi


def fit_coast_down(log, *, device=None, scenario=None) -> FitResult:
    """Fit a coast-down: decay rate b/I_w and deceleration T_c/I_w; with a scenario's I_w, b and T_c."""
    t, w, where = _speed(log, "a coast-down is fitted to the wheel speed")
    sgn = 1.0 if np.median(w) >= 0 else -1.0
    ws = sgn * w
    fit = _fit_coast(t, ws, where=where)
    (w0, a, c, t0), sig, i0, i1 = fit["p"], fit["sigma"], fit["i0"], fit["i1"]
    res = FitResult("coast-down")
    res.put("start_speed_rad_s", sgn * w0, sig[0])
    res.put("viscous_decay_rate_1_s", a, sig[1])
    res.put("coulomb_deceleration_rad_s2", c, sig[2])
    res.facts.update({"coast_start_s": t0, "coast_end_s": float(t[i1 - 1]), "samples_used": int(i1 - i0),
                      "residual_rms_rad_s": fit["rms"]})
    _binned_note(res, fit["bin"])
    model = np.full(len(t), np.nan)
    model[i0:i1] = sgn * coast_model(np.maximum(t[i0:i1] - t0, 0.0), fit["p"][:3])
    res.plot = {"t_s": t, "data": w, "model": model, "label": "wheel speed [rad/s]", "title": "coast-down"}
    res.notes.append("Assumes the body is held and the winding open (no current): a shorted or braking driver "
                     "adds electrical damping that shows up here as viscous friction.")
    if log.has("current_a") and np.max(np.abs(log.columns["current_a"][i0:i1])) > 0.05:
        res.notes.append("Current flows during the coast; the driver was not off, so the friction is overestimated.")
    if device is None:
        res.notes.append("Give --scenario for the wheel's spin inertia: then the bearing friction torques follow.")
        return res
    iw = device.I_w_kg_m2
    res.put("bearing_viscous_n_m_s_per_rad", a * iw, sig[1] * iw)
    res.put("bearing_coulomb_torque_n_m", c * iw, sig[2] * iw)
    res.facts["wheel_spin_inertia_kg_m2"] = iw
    res.notes.append(f"Uses the scenario's wheel spin inertia ({iw:.4g} kg m^2), taken as exact.")
    res.patch = {"wheel": {"bearing_friction": {"coulomb": c * iw, "viscous": a * iw}}}
    return res


def _fit_coast(t: np.ndarray, ws: np.ndarray, *, where: str) -> dict:
    """Least-squares coast-down with a free start time (the speed holds until the coast begins).

    The window runs from the speed's peak (a spin-up before it is left out) to where the wheel has
    all but stopped. Returns {"p": (w0, a, c, t_start), "sigma", "i0", "i1", "rms"}.
    """
    sm = smooth_signal(ws, len(ws) / 100.0)
    sigma = max(noise_sigma(t, ws), 1e-12)
    i0 = int(np.argmax(sm))
    peak = sm[i0]
    low = np.nonzero(sm[i0:] < max(5.0 * sigma, 0.02 * peak))[0]
    i1 = i0 + (int(low[0]) if low.size else len(ws) - i0)
    if i1 - i0 < 20 or peak <= 0 or sm[i1 - 1] > 0.8 * peak:
        raise InputError(f"{where}: does not look like a coast-down: the wheel speed does not fall by a fifth "
                         "after its peak")
    # friction alone never turns a wheel round or speeds it up again
    if np.min(sm[i0:]) < -max(5.0 * sigma, 0.05 * peak) or (i1 < len(sm) and np.max(sm[i1:]) > 0.5 * peak):
        raise InputError(f"{where}: does not look like a coast-down: the wheel speed turns round or rises again "
                         "after falling")
    tt, y = t[i0:i1], ws[i0:i1]
    falling = np.nonzero(sm[i0:i1] < peak - max(5.0 * sigma, 0.01 * peak))[0]
    t_fall = tt[falling[0]] if falling.size else tt[0]
    decel = (y[0] - y[-1]) / max(tt[-1] - t_fall, 1e-12)

    k = bin_size(len(tt))   # a long log: fitted to bin means, in bounded memory
    tb, yb = bin_means(tt, k), bin_means(y, k)

    def misfit(p, tt=tb, y=yb):
        return coast_model(np.maximum(tt - p[3], 0.0), p[:3]) - y

    guess = [peak, 0.1 / max(tt[-1] - tt[0], 1e-9), 0.5 * decel, t_fall]
    fit = least_squares(misfit, guess, bounds=([0.0, 0.0, 0.0, tt[0]], [np.inf, np.inf, np.inf, tt[-1]]),
                        x_scale="jac")
    residual = fit.fun if k == 1 else misfit(fit.x, tt, y)
    return {"p": [float(v) for v in fit.x], "sigma": np.sqrt(np.diag(covariance(fit))), "i0": i0, "i1": i1,
            "rms": float(np.sqrt(np.mean(residual**2))), "bin": k}
