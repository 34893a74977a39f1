"""Fitting the model to bench logs: the common result type and the helpers the fits share.

Three bench tests are supported (`TESTS`; `sim.fit.bench_tests.fit_log` picks the fit); each has
its own module:

- ``free-swing`` (`sim.fit.fit_swing`): the body released from an angle and swinging about hanging
  with the wheel coasting; period, natural frequency, damping, pivot friction, body inertia.
- ``spin-up`` and ``coast-down`` (`sim.fit.fit_wheel`): the body held, a voltage step on the motor;
  the driver off and the wheel spinning down. Motor constants, wheel inertia, bearing friction.

Every fitted value carries a one-standard-deviation uncertainty from the fit's covariance
(linearised about the optimum); values that lean on scenario figures treat those as exact.
Output keys carry their SI unit (``period_s``, ``damping_ratio`` is dimensionless).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np


TESTS = ("free-swing", "spin-up", "coast-down")


@dataclass
class FitResult:
    """What a fit found.

    Attributes
    ----------
    test : one of TESTS.
    values : key with unit -> (value, one-sigma uncertainty or None when not applicable).
    facts : key with unit -> plain figures about the log (samples used, step time, residual rms).
    patch : nested mapping of scenario keys the fit determines, SI values, ready to merge.
    notes : assumptions and warnings in plain sentences.
    plot : what to draw: {"t_s", "data", "model", "label", "title"}; arrays of equal length.
    target_note : where the patch's motor values went on a device with several wheels (also in
        `notes`; the terminal shows it), or None.
    """

    test: str
    values: dict[str, tuple[float, float | None]] = field(default_factory=dict)
    facts: dict[str, float | int | str | None] = field(default_factory=dict)
    patch: dict = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    plot: dict = field(default_factory=dict)
    target_note: str | None = None

    def put(self, key: str, value: float, sigma: float | None) -> None:
        self.values[key] = (float(value), None if sigma is None else float(abs(sigma)))

    def value(self, key: str) -> float:
        return self.values[key][0]


# ----------------------------------------------------------------------------- shared helpers

def covariance(res) -> np.ndarray:
    """Parameter covariance of a `scipy.optimize.least_squares` result: s^2 (J'J)^-1.

    s^2 is the residual variance with the degrees of freedom removed, so the uncertainty scales
    with the scatter actually seen in the log.
    """
    jac = np.atleast_2d(res.jac)
    m, n = jac.shape
    s2 = 2.0 * res.cost / max(m - n, 1)
    return s2 * np.linalg.pinv(jac.T @ jac)


def linear_fit(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """Ordinary least squares y ~ X p. Returns (p, covariance of p, residual rms)."""
    p, *_ = np.linalg.lstsq(X, y, rcond=None)
    r = y - X @ p
    m, n = X.shape
    s2 = float(r @ r) / max(m - n, 1)
    return p, s2 * np.linalg.pinv(X.T @ X), math.sqrt(float(r @ r) / m)


def noise_sigma(t: np.ndarray, x: np.ndarray) -> float:
    """Robust estimate of white noise on a densely sampled smooth signal, same unit as x.

    Each sample is compared with the straight line through its two neighbours (exact for any
    sample spacing on a linear signal); the misfit holds the noise with variance
    (1 + a^2 + b^2) sigma^2 for the neighbours' interpolation weights a, b. The median absolute
    deviation (times 1.4826) keeps the few samples where the signal bends sharply from counting.
    """
    t, x = np.asarray(t, dtype=float), np.asarray(x, dtype=float)
    if len(x) < 3:
        return 0.0
    span = t[2:] - t[:-2]
    a = (t[2:] - t[1:-1]) / span
    b = 1.0 - a
    r = (x[1:-1] - (a * x[:-2] + b * x[2:])) / np.sqrt(1.0 + a * a + b * b)
    return float(1.4826 * np.median(np.abs(r - np.median(r))))


def smooth_signal(x: np.ndarray, window: int) -> np.ndarray:
    """Centred moving average over `window` samples (made odd), applied twice (a triangular kernel).

    Edges are padded by reflection. Used to find features; fits use the raw samples.
    (Written here rather than taken from scipy.signal, whose import costs seconds.)
    """
    half = max(1, int(window) // 2)
    half = min(half, (len(x) - 1) // 2)
    if half < 1:
        return np.asarray(x, dtype=float).copy()
    out = np.asarray(x, dtype=float)
    for _ in range(2):
        padded = np.pad(out, half, mode="reflect")
        c = np.concatenate([[0.0], np.cumsum(padded)])
        out = (c[2 * half + 1:] - c[:-2 * half - 1]) / (2 * half + 1)
    return out


def local_maxima(x: np.ndarray, *, half_width: int, min_rise: float) -> np.ndarray:
    """Indices i where x[i] is the first largest value within +-half_width samples and stands at
    least `min_rise` above the lowest value within +-2 half_width (a simple prominence test).

    Running maxima and minima (scipy.ndimage's filters) keep time and memory in proportion to the
    samples, whatever the width (a window per sample would take samples x width).
    """
    from scipy.ndimage import maximum_filter1d, minimum_filter1d

    h = max(1, int(half_width))
    x = np.asarray(x, dtype=float)
    if len(x) < 2 * h + 1:
        return np.zeros(0, dtype=int)
    top = maximum_filter1d(x, size=2 * h + 1, mode="constant", cval=-np.inf)
    # the largest of the h samples ending at each index; shifted by one, those just before it
    ending = maximum_filter1d(x, size=h, mode="constant", cval=-np.inf, origin=(h - 1) // 2)
    before = np.concatenate(([-np.inf], ending[:-1]))
    is_top = (x == top) & (x > before)
    low = minimum_filter1d(x, size=4 * h + 1, mode="nearest")
    return np.nonzero(is_top & (x - low >= min_rise))[0]


FIT_SAMPLES = 250_000
"""Most samples a least-squares model fit takes (its Jacobian and solver hold ~40 copies of the
samples); a longer window is fitted to the means of bins of equal count (`bin_means`)."""


def bin_size(n: int) -> int:
    """Samples per bin so that `n` samples make at most FIT_SAMPLES bins (1: no binning)."""
    return max(1, -(-int(n) // FIT_SAMPLES))


def bin_means(x: np.ndarray, k: int) -> np.ndarray:
    """Means of consecutive runs of `k` samples; a last run shorter than `k` is left out.

    The mean of k samples with independent noise sigma has noise sigma / sqrt(k), so a fit to
    n / k means has the same parameter uncertainty as one to the n samples while the model is
    near straight within a bin (common practice, no source)."""
    if k <= 1:
        return x
    full = len(x) // k * k
    return np.asarray(x[:full], dtype=float).reshape(-1, k).mean(axis=1)


def ratio_sigma(value: float, *rel: float) -> float:
    """|value| times the quadrature sum of relative uncertainties (independent errors)."""
    return abs(value) * math.sqrt(sum(r * r for r in rel))
