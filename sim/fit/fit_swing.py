"""Free-swing fit: the body released from an angle, swinging about hanging with the wheel coasting.

Model, about the hanging position (psi = angle from hanging, rad):

    J psi'' = -m g d sin(psi) - b psi' - T_c sign(psi')

with J the body's inertia about the pivot (the wheel's and motor's masses at their distance
included; the coasting wheel's spin inertia does NOT take part when its bearing is free, see
../shared/references.md), m g d = mbar g, b the pivot's viscous and T_c its Coulomb friction.

Method. The swing's turning points are found and refined; their amplitudes A_k obey an energy
balance per half cycle that is exact for gravity and Coulomb friction and, for viscous friction,
evaluates the loss on the undamped swing of the mean amplitude (accurate to third order in the
damping ratio for small swings):

    cos A_(k+1) - cos A_k = e (A_k + A_(k+1)) + 2 zeta I(Abar),   e = T_c / (m g d),
    I(A) = 8 [E(m) - (1 - m) K(m)],  m = sin^2(A/2)   (the integral of sqrt(2(cos psi - cos A)))

which is linear in (e, zeta): one least-squares fit gives both with their covariance. The period
comes from the turning-point times, each half cycle corrected to small amplitude with
T/T0 = (2/pi) K(sin^2(A/2)) and for damping with T_d = T0 / sqrt(1 - zeta^2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import ellipe, ellipk

from ..core.errors import InputError
from .fitting import FitResult, linear_fit, local_maxima, noise_sigma, smooth_signal
from .logs import resample_uniform

MIN_EXTREMES = 5            # turning points after the release: two full cycles
MIN_SAMPLES_PER_CYCLE = 8
FEATURE_SAMPLES = 262_144
"""Most samples of the even grid the turning points are found on (2^18): a longer or faster log
is found on a coarser grid, so memory stays bounded (the fits use the logged samples)."""


# ----------------------------------------------------------------------------- reference formulas

def period_ratio(amplitude_rad):
    """T/T0 of a pendulum swinging with `amplitude_rad`: (2/pi) K(m), m = sin^2(A/2).

    scipy's `ellipk` takes the parameter m = k^2 (see ../shared/references.md).
    """
    a = np.asarray(amplitude_rad, dtype=float)
    return 2.0 / math.pi * ellipk(np.sin(a / 2.0) ** 2)


def swing_speed_integral(amplitude_rad):
    """I(A): the integral over psi from -A to A of sqrt(2 (cos psi - cos A)) (angles in rad).

    Times b w0 it is the energy a viscous pivot takes over one undamped half cycle of amplitude A
    (psi' = w0 sqrt(2 (cos psi - cos A)) on that swing); for small A it tends to pi A^2 / 2.
    """
    m = np.sin(np.asarray(amplitude_rad, dtype=float) / 2.0) ** 2
    return 8.0 * (ellipe(m) - (1.0 - m) * ellipk(m))


def log_decrement(first: float, later: float, cycles: int) -> float:
    """delta = (1/n) ln(x_k / x_(k+n)) from two amplitudes `cycles` full cycles apart."""
    return math.log(first / later) / cycles


def damping_ratio_from_decrement(delta: float) -> float:
    """zeta = delta / sqrt(4 pi^2 + delta^2)."""
    return delta / math.sqrt(4.0 * math.pi**2 + delta**2)


def decrement_from_damping_ratio(zeta: float) -> float:
    """The inverse of `damping_ratio_from_decrement`: delta = 2 pi zeta / sqrt(1 - zeta^2)."""
    return 2.0 * math.pi * zeta / math.sqrt(1.0 - zeta**2)


def coulomb_loss_per_cycle(torque_n_m: float, mgd_n_m: float) -> float:
    """Amplitude lost per full cycle to Coulomb friction alone, rad: 4 T_c / (m g d)."""
    return 4.0 * torque_n_m / mgd_n_m


# ----------------------------------------------------------------------------- the fit

@dataclass
class Extremes:
    """Turning points after the release: times (s), angles (rad), noise (rad), period guess (s)."""

    times: np.ndarray
    values: np.ndarray
    noise_rad: float
    period_guess_s: float


def fit_free_swing(log, *, device=None, scenario=None) -> FitResult:
    """Fit a free-swing log. `device`/`scenario` give m g d (for inertia and friction torques)."""
    where = f"{log.path}: {log.label('angle_rad')}"
    x = log.require("angle_rad", why="a free swing is fitted to the body angle")
    ext = find_extremes(log.t_s, x, where=where)
    centre = swing_centre(ext.values)
    amps = np.abs(ext.values - centre)
    decay = fit_decay(amps, where=where)
    period = fit_period(ext.times, amps, decay["zeta"])
    res = FitResult("free-swing")
    res.put("period_s", period["measured_s"], period["measured_sigma_s"])
    res.put("small_amplitude_period_s", period["t0_s"], period["t0_sigma_s"])
    w0 = 2.0 * math.pi / period["t0_s"]
    res.put("natural_frequency_rad_s", w0, w0 * period["t0_sigma_s"] / period["t0_s"])
    zeta, s_zeta = decay["zeta"], decay["zeta_sigma"]
    res.put("damping_ratio", zeta, s_zeta)
    delta = decrement_from_damping_ratio(zeta)
    res.put("log_decrement", delta, s_zeta * 2.0 * math.pi / (1.0 - zeta**2) ** 1.5)
    res.put("coulomb_angle_rad", decay["e"], decay["e_sigma"])
    res.put("coulomb_amplitude_loss_rad_per_cycle", 4.0 * decay["e"], 4.0 * decay["e_sigma"])
    res.facts.update({
        "decay": decay["kind"], "turning_points_used": int(len(amps)),
        "cycles_used": round((len(amps) - 1) / 2.0, 1), "first_amplitude_rad": float(amps[0]),
        "last_amplitude_rad": float(amps[-1]), "hanging_angle_rad": float(centre),
        "angle_noise_rad": ext.noise_rad, "first_turning_point_s": float(ext.times[0]),
    })
    res.notes.append("The coasting wheel's spin inertia does not take part in the swing (free bearing assumed); "
                     "a wheel held, or dragged along by bearing friction, adds its spin inertia to the fitted inertia.")
    res.notes.extend(decay["notes"])
    _plot(res, log.t_s, x, ext, centre, w0, zeta, decay["e"])
    if device is None:
        res.notes.append("Give --scenario for m g d: then the body's inertia about the pivot and the pivot friction "
                         "torques follow.")
    else:
        _with_scenario(res, device, scenario, w0, period, decay, centre)
    return res


def find_extremes(t: np.ndarray, x: np.ndarray, *, where: str) -> Extremes:
    """Turning points of the swing after its release, refined by a local sinusoid fit."""
    logged_dt = float(np.median(np.diff(t)))
    grid, xu = resample_uniform(t, x, step_s=max(logged_dt, (t[-1] - t[0]) / (FEATURE_SAMPLES - 1)))
    dt = grid[1] - grid[0]
    freq = dominant_frequency(xu, dt)
    if freq is None:
        raise InputError(f"{where}: does not look like a free swing: no oscillation found in the angle")
    per = 1.0 / freq
    n_per = per / dt
    if per / logged_dt < MIN_SAMPLES_PER_CYCLE:
        raise InputError(f"{where}: sampled too slowly: {per / logged_dt:.1f} samples per {per:.3g} s swing "
                         f"(need at least {MIN_SAMPLES_PER_CYCLE})")
    sm = smooth_signal(xu, n_per / 10.0)
    steps = np.abs(np.diff(x))
    steps = steps[steps > 0.0]
    # an encoder's counts leave no noise to measure: its step's own spread, q / sqrt(12), is the floor
    quantum = float(np.min(steps)) / math.sqrt(12.0) if steps.size else 0.0
    sigma = max(noise_sigma(t, x), quantum, 1e-9)
    # a held lead-in: the swing starts where the angle leaves its starting value
    moving = np.nonzero(np.abs(sm - sm[0]) > max(8.0 * sigma, 1e-3 * np.ptp(sm)))[0]
    start = (moving[0] if moving.size else 0) + n_per / 8.0
    kw = dict(half_width=int(0.3 * n_per), min_rise=6.0 * sigma)
    peaks = [(i, 1) for i in local_maxima(sm, **kw)] + [(i, -1) for i in local_maxima(-sm, **kw)]
    alternating: list[tuple[int, int]] = []
    end = len(sm) - 1 - n_per / 8.0  # smoothing near the log's end makes false turning points
    for i, s in sorted(p for p in peaks if start < p[0] < end):
        if alternating and alternating[-1][1] == s:  # two maxima in a row: keep the larger
            if s * sm[i] > s * sm[alternating[-1][0]]:
                alternating[-1] = (i, s)
            continue
        alternating.append((i, s))
    times, values = _refine(t, x, grid, alternating, 2.0 * math.pi / per, per / 8.0)
    times, values = _consistent(times, values, 5.0 * sigma)
    if len(times) < MIN_EXTREMES:
        raise InputError(f"{where}: too few cycles: {len(times)} turning points after the release, need at least "
                         f"{MIN_EXTREMES} (two full cycles); log a longer swing")
    return Extremes(times, values, sigma, per)


def dominant_frequency(xu: np.ndarray, dt: float) -> float | None:
    """The strongest spectral line of an evenly sampled signal, Hz; None when no clear line stands out."""
    n = len(xu)
    y = (xu - np.mean(xu)) * np.hanning(n)
    nfft = 4 * (1 << int(math.ceil(math.log2(max(n, 2)))))
    spec = np.abs(np.fft.rfft(y, nfft))
    freqs = np.fft.rfftfreq(nfft, dt)
    band = (freqs >= 1.5 / (n * dt)) & (freqs <= 0.25 / dt)
    if not band.any():
        return None
    k = int(np.argmax(np.where(band, spec, 0.0)))
    # a clear line stands well above the band's typical level (noise gives ratios near 3)
    if spec[k] < 8.0 * np.median(spec[band]) or spec[k] == 0.0:
        return None
    return float(freqs[k])


def _refine(t, x, grid, picks, omega, half_window):
    """Each turning point from a local fit x ~ c + p cos(w u) + q sin(w u) over +-half_window."""
    times, values = [], []
    for i, s in picks:
        tc = grid[i]
        sel = slice(np.searchsorted(t, tc - half_window, "left"), np.searchsorted(t, tc + half_window, "right"))
        if sel.stop - sel.start < 5:
            continue
        u = t[sel] - tc
        X = np.column_stack([np.ones_like(u), np.cos(omega * u), np.sin(omega * u)])
        (c, p, q), *_ = np.linalg.lstsq(X, x[sel], rcond=None)
        phase = math.atan2(q, p) if s > 0 else math.atan2(-q, -p)
        if abs(phase / omega) > half_window:  # the local fit put the turn outside its own window
            continue
        times.append(tc + phase / omega)
        values.append(c + s * math.hypot(p, q))
    return np.array(times), np.array(values)


def _consistent(times, values, min_amplitude):
    """Keep turning points up to the first odd spacing or the first swing lost in the noise."""
    if len(times) < 3:
        return times, values
    half = np.diff(times)
    med = np.median(half)
    keep = len(times)
    for k, h in enumerate(half):
        if not 0.75 * med <= h <= 1.25 * med or abs(values[k + 1] - values[k]) / 2.0 < min_amplitude:
            keep = k + 1
            break
    return times[:keep], values[:keep]


def swing_centre(values: np.ndarray) -> float:
    """The angle the swing is centred on: median of (v_k + 2 v_(k+1) + v_(k+2)) / 4.

    This weighting cancels a linear (Coulomb) decay exactly and an exponential one to second order.
    """
    v = np.asarray(values)
    return float(np.median((v[:-2] + 2.0 * v[1:-1] + v[2:]) / 4.0))


DECAY_SIGNIFICANCE = 0.01   # p-value below which the decay as a whole counts as measured (our choice)
BIC_EVEN = 2.0              # a BIC difference below 2 is "not worth more than a bare mention" (Kass & Raftery 1995)


def fit_decay(amps: np.ndarray, *, where: str) -> dict:
    """Viscous damping ratio and Coulomb angle e = T_c/(m g d) from successive amplitudes.

    The decay is first tested as a whole: an F-test of the two-term fit against no decay at all
    (y = 0), since the viscous and Coulomb columns are strongly correlated and each alone can fall
    under its own two standard deviations while together they are clear (Draper & Smith, Applied
    Regression Analysis, 3rd ed., sec. 6: the extra-sum-of-squares F-test). Only when the decay is
    significant is the model chosen, among viscous, Coulomb and both, by the Bayesian information
    criterion of each least-squares fit, n ln(RSS/n) + k ln n (Schwarz 1978); a decay that is
    measured is never set to zero.
    """
    from scipy.stats import f as f_dist

    a0, a1 = amps[:-1], amps[1:]
    y = np.cos(a1) - np.cos(a0)
    cols = {"e": a0 + a1, "zeta": 2.0 * swing_speed_integral((a0 + a1) / 2.0)}
    p, cov, _ = linear_fit(np.column_stack([cols["e"], cols["zeta"]]), y)
    sig = np.sqrt(np.diag(cov))
    out = {"e": float(p[0]), "e_sigma": float(sig[0]), "zeta": float(p[1]), "zeta_sigma": float(sig[1]), "notes": []}
    if p[1] < -3.0 * sig[1] and p[1] < -0.002:
        raise InputError(f"{where}: does not look like a free swing: the amplitude grows (damping ratio "
                         f"{p[1]:.3g}); is the motor driving the body?")
    n = len(y)
    fits = {names: _decay_fit(cols, names, y) for names in (("e", "zeta"), ("zeta",), ("e",))}
    rss_both, rss_none = fits[("e", "zeta")]["rss"], float(y @ y)
    dof = max(n - 2, 1)
    f_stat = ((rss_none - rss_both) / 2.0) / max(rss_both / dof, 1e-300)
    out["decay_p_value"] = float(f_dist.sf(f_stat, 2, dof)) if n > 2 else 1.0
    if out["decay_p_value"] >= DECAY_SIGNIFICANCE or not (p[0] > 0 or p[1] > 0):
        out["notes"].append(f"The decay is too small to measure in this log (F-test against no decay: p = "
                            f"{out['decay_p_value']:.2g}); friction values are set to 0.")
        out["e"], out["zeta"], out["kind"] = 0.0, 0.0, "none measurable"
        return out
    # physical fits only (no negative friction), then the lowest BIC
    usable = {k: v for k, v in fits.items() if all(x >= 0 for x in v["p"])}
    bic = {k: n * math.log(max(v["rss"], 1e-300) / n) + len(k) * math.log(n) for k, v in usable.items()}
    best = min(bic, key=bic.get)
    if best == ("e",) and ("zeta",) in bic and bic[("zeta",)] - bic[best] < BIC_EVEN:
        # over a narrow range of amplitudes the two decays look alike: keep the viscous one
        best = ("zeta",)
        out["notes"].append(f"A Coulomb decay (e = {usable[('e',)]['p'][0]:.3g} rad) fits this log as well as a "
                            "viscous one; the viscous model is kept. Swing from a larger angle to tell them apart.")
    for name in ("e", "zeta"):
        if name in best:
            i = best.index(name)
            out[name], out[name + "_sigma"] = float(usable[best]["p"][i]), float(usable[best]["sigma"][i])
        else:
            out[name] = 0.0
    label = {"e": "Coulomb", "zeta": "viscous"}
    if len(best) == 1:
        other = "zeta" if best == ("e",) else "e"
        out["notes"].append(f"The decay is measured (p = {out['decay_p_value']:.2g}) and a {label[best[0]]} model "
                            f"alone describes it best (information criterion); the {label[other]} part is set to 0.")
    out["kind"] = "viscous and coulomb" if len(best) == 2 else ("viscous" if best == ("zeta",) else "coulomb")
    return out


def _decay_fit(cols: dict, names: tuple, y: np.ndarray) -> dict:
    """Least squares of the amplitude decay on the named columns: p, sigma and residual sum of squares."""
    X = np.column_stack([cols[k] for k in names])
    p, cov, rms = linear_fit(X, y)
    return {"p": p, "sigma": np.sqrt(np.diag(cov)), "rss": rms * rms * len(y)}


def fit_period(times: np.ndarray, amps: np.ndarray, zeta: float) -> dict:
    """Measured period, and the small-amplitude undamped period T0, from the turning-point times.

    The turning times are regressed on the cumulative sum of per-half-cycle period ratios, so
    each half cycle is corrected for its own mean amplitude.
    """
    k = np.arange(len(times), dtype=float)
    p, cov, _ = linear_fit(np.column_stack([np.ones_like(k), k]), times)
    ratios = period_ratio((amps[:-1] + amps[1:]) / 2.0)
    c = np.concatenate([[0.0], np.cumsum(ratios)])
    q, qcov, _ = linear_fit(np.column_stack([np.ones_like(c), c]), times)
    damp = math.sqrt(max(1.0 - zeta**2, 1e-12))
    return {"measured_s": 2.0 * p[1], "measured_sigma_s": 2.0 * math.sqrt(cov[1, 1]),
            "t0_s": 2.0 * q[1] * damp, "t0_sigma_s": 2.0 * math.sqrt(qcov[1, 1]) * damp}


def _with_scenario(res: FitResult, device, scenario, w0: float, period: dict, decay: dict, centre: float) -> None:
    mgd = abs(device.mbar_kg_m) * device.gravity_m_s2
    if mgd <= 0.0:
        raise InputError(f"{scenario.source}: the scenario has no gravity torque about the pivot (m g d = 0), "
                         "so a free swing cannot give the inertia")
    rel_t0 = period["t0_sigma_s"] / period["t0_s"]
    J = mgd / w0**2
    res.put("body_inertia_about_pivot_kg_m2", J, 2.0 * J * rel_t0)
    res.facts["model_body_inertia_about_pivot_kg_m2"] = device.J_kg_m2
    res.facts["m_g_d_n_m"] = mgd
    b = 2.0 * decay["zeta"] * w0 * J  # = 2 zeta m g d / w0
    res.put("pivot_viscous_n_m_s_per_rad", b, 2.0 * mgd / w0 * math.hypot(decay["zeta_sigma"], decay["zeta"] * rel_t0))
    res.put("coulomb_torque_n_m", decay["e"] * mgd, decay["e_sigma"] * mgd)
    res.notes.append(f"Uncertainties treat the scenario's m g d ({mgd:.4g} N m) as exact.")
    if device.wheel_coulomb_n_m > 0.0 or device.wheel_viscous_n_m_s > 0.0:
        res.notes.append("The scenario's wheel bearing has friction: the pivot friction fitted here also holds the "
                         "bearing's share of the damping, and if the bearing drags the wheel along, the fitted inertia "
                         f"includes the wheel's spin inertia ({device.I_w_kg_m2:.4g} kg m^2).")
    hanging = abs(abs(centre) % (2.0 * math.pi) - math.pi)
    if device.mbar_kg_m > 0 and hanging > 0.3:
        res.notes.append(f"The swing is centred on {centre:.3f} rad; our convention puts hanging at +-pi: check the "
                         "logged angle's zero and sign.")
    correction = scenario.body.inertia_correction + (J - device.J_kg_m2)
    res.patch = {"body": {"inertia_correction": correction,
                          "pivot_friction": {"coulomb": res.value("coulomb_torque_n_m"),
                                             "viscous": res.value("pivot_viscous_n_m_s_per_rad")}}}


def _plot(res: FitResult, t, x, ext: Extremes, centre: float, w0: float, zeta: float, e: float) -> None:
    sel = t >= ext.times[0]
    model = simulate_swing(t[sel], t0=ext.times[0], psi0=ext.values[0] - centre, w0=w0, zeta=zeta, e=e)
    data = x[sel] - centre
    res.facts["residual_rms_rad"] = float(np.sqrt(np.nanmean((data - model) ** 2)))
    res.plot = {"t_s": t[sel], "data": np.degrees(data), "model": np.degrees(model),
                "label": "angle from hanging [deg]", "title": "free swing"}


def simulate_swing(t_eval: np.ndarray, *, t0: float, psi0: float, w0: float, zeta: float, e: float) -> np.ndarray:
    """psi(t) of the model released at rest from `psi0` at `t0`, rad, one half cycle at a time.

    Coulomb friction keeps one sign over each half cycle, so each piece is a smooth ODE; the body
    sticks at a turning point where gravity cannot beat friction (|sin psi| <= e).
    """
    from scipy.integrate import solve_ivp

    out = np.full(len(t_eval), np.nan)
    c = e * w0**2
    t, psi = t0, psi0
    t_end = float(t_eval[-1]) if len(t_eval) else t0
    for _ in range(100_000):
        if abs(math.sin(psi)) <= e or t >= t_end:
            out[np.searchsorted(t_eval, t, "left"):] = psi   # t_eval increases
            break
        sign = -math.copysign(1.0, psi)  # moving towards hanging

        def rhs(_t, y, sign=sign):
            return [y[1], -w0**2 * math.sin(y[0]) - 2.0 * zeta * w0 * y[1] - c * sign]

        def turn(_t, y):
            return y[1]

        turn.terminal, turn.direction = True, -sign
        sol = solve_ivp(rhs, (t, t_end), [psi, 0.0], events=turn, dense_output=True, rtol=1e-9, atol=1e-12)
        mask = slice(np.searchsorted(t_eval, t, "left"), np.searchsorted(t_eval, sol.t[-1], "right"))
        out[mask] = sol.sol(t_eval[mask])[0]
        if sol.status != 1:
            break
        t, psi = float(sol.t[-1]), float(sol.y[0, -1])
    return out
