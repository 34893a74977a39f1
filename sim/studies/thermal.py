"""Winding temperature from the motor current: a first-order thermal model.

    C dT/dt = i^2 R(T) - (T - T_amb) / R_th,     R(T) = R_20 (1 + alpha (T - 20 degC))

(references.md, "Motor": first-order winding heating with the copper temperature coefficient.)
`motor.resistance` is taken as the winding resistance at 20 degC, the usual datasheet condition
(common practice, no source). Temperatures are in degC, thermal resistance in K/W, heat capacity
in J/K. A single lumped node ignores the faster winding-to-stator step, so short peaks run hotter
than this says. `check` and `sweep` judge the same figure, `WINDING_BASIS`: the steady temperature at
the RMS current of the scenario's own trial (both run it) while it balances, from the catch (or the
start, for a trial that starts balancing) to any fall or the end, as if that ran continuously: the
one-off swing-up is left out; the trial's pushes stay in, which errs warm.
"""

from __future__ import annotations

import math

import numpy as np

# Temperature coefficient of resistance of annealed copper at 20 degC, 1/K: 0.00393 (IEC 60028,
# from memory); references.md lists 0.0039 [mem].
COPPER_TEMPCO_PER_K = 0.00393
REFERENCE_C = 20.0


def steady_temperature_c(current_rms_a: float, *, resistance_20c_ohm: float, thermal_resistance_k_w: float,
                         ambient_c: float, tempco_per_k: float = COPPER_TEMPCO_PER_K) -> float:
    """Steady winding temperature at a constant RMS current, degC; inf on thermal runaway.

    Solves T = T_amb + R_th i^2 R_20 (1 + alpha (T - 20)) for T. When R_th i^2 R_20 alpha >= 1 the
    heating outgrows the cooling at every temperature and there is no steady state.
    """
    k = thermal_resistance_k_w * current_rms_a**2 * resistance_20c_ohm
    denom = 1.0 - k * tempco_per_k
    if denom <= 0.0:
        return math.inf
    return (ambient_c + k * (1.0 - REFERENCE_C * tempco_per_k)) / denom


def temperature_history_c(current_a: np.ndarray, step_s: float, *, resistance_20c_ohm: float,
                          thermal_resistance_k_w: float, thermal_capacity_j_k: float, ambient_c: float,
                          start_c: float | None = None, tempco_per_k: float = COPPER_TEMPCO_PER_K) -> np.ndarray:
    """Winding temperature after each step of a current history, degC.

    The equation is linear in T for a current held over a step, dT/dt = p + q T, so each step is
    advanced exactly: T' = T_inf + (T - T_inf) exp(q dt).
    """
    temps = np.empty(len(current_a))
    t = ambient_c if start_c is None else start_c
    c, rth = thermal_capacity_j_k, thermal_resistance_k_w
    for n, i in enumerate(current_a):
        heat = i * i * resistance_20c_ohm
        p = (heat * (1.0 - REFERENCE_C * tempco_per_k) + ambient_c / rth) / c
        q = (heat * tempco_per_k - 1.0 / rth) / c
        if abs(q) < 1e-15:
            t = t + p * step_s
        else:
            t_inf = -p / q
            t = t_inf + (t - t_inf) * math.exp(q * step_s)
        temps[n] = t
    return temps


# The one basis `check` and `sweep` judge the winding on: both run the scenario's own trial.
WINDING_BASIS = ("steady state at the RMS current of the scenario's own trial while balancing (from the catch, "
                 "or the start, to any fall or the end), as if that ran continuously")


def trial_rms_current_a(current_a: np.ndarray, step_s: float, fell_at_s: float | None,
                        caught_at_s: float | None = None) -> float:
    """RMS of a trial's winding current (A) from its catch (`caught_at_s`, s; None: the start) to its
    fall (`fell_at_s`, s; None: the end).

    The rows after a fall are left out so that a run stopped at the fall and one that flails on to
    its end give the same figure; the swing-up before a catch is a one-off, not continuous duty;
    non-finite rows (a diverged run) are left out too.
    """
    rows = np.asarray(current_a, dtype=float)
    if fell_at_s is not None:
        rows = rows[: max(1, int(round(fell_at_s / step_s)))]
    if caught_at_s is not None:
        rows = rows[min(int(round(caught_at_s / step_s)), max(len(rows) - 1, 0)):]
    rows = rows[np.isfinite(rows)]
    return float(np.sqrt(np.mean(rows**2))) if rows.size else 0.0


def winding_check(motor, rms_current_a: float, *, basis: str = WINDING_BASIS) -> dict:
    """The verdict's thermal figures for a scenario's `motor` at a continuous RMS current."""
    th = motor.thermal
    steady = steady_temperature_c(rms_current_a, resistance_20c_ohm=motor.resistance,
                                  thermal_resistance_k_w=th.thermal_resistance, ambient_c=th.ambient)
    return {
        "basis": basis,
        "rms_current_a": rms_current_a,
        "steady_winding_temperature_c": steady,
        "temperature_rise_k": steady - th.ambient,
        "max_winding_temperature_c": th.max_temperature,
        "thermal_time_constant_s": th.thermal_resistance * th.thermal_capacity,
        "ambient_c": th.ambient,
    }
