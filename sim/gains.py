"""Gains for firmware: the balance strategy's LQR design as JSON or as a C header.

The numbers are the ones the simulator runs (`sim.lqr_design.design_lqr`), so a firmware loop
fed the same state in the same units and signs does what the simulation did. Conventions:
state x = [angle rad (0 upright), body rate rad/s, wheel speed rad/s relative to the body],
voltage = -K x, positive voltage accelerates the wheel positively and turns the body negatively.
"""

from __future__ import annotations

import json
import math

import numpy as np

from .errors import InputError
from .lqr_design import STATE_NAMES, STATE_UNITS, DelayPredictor, bryson_weights, design_lqr

SIGN_CONVENTION = ("voltage = -K x; angle 0 = upright (right-hand rule about the pivot axis); wheel speed "
                   "relative to the body; positive voltage accelerates the wheel positively and turns the body "
                   "negatively")
CAUTION = ("Model-based gains: bring them up on a guarded rig with a software wheel-speed limit and a "
           "hardware stop, at reduced supply first. A spinning wheel can burst; follow local codes and "
           "licensed practice.")


def balance_lqr_params(scenario):
    """The LQR parameters of the scenario's balance law; InputError when there is none."""
    from .strategies.lqr import LqrBalance
    spec = scenario.strategy
    balance = getattr(spec.params, "balance", None)
    if balance is not None and hasattr(balance, "cls"):   # a supervisor: export its balance law
        spec = balance
    if isinstance(spec.cls, type) and issubclass(spec.cls, LqrBalance):
        return spec.params
    raise InputError(f"{scenario.source}: strategy: the balance law is {spec.kind!r}, which has no LQR design; "
                     f"gains are exported for 'lqr' (alone or as swing_and_catch's balance)")


def gains_report(scenario) -> dict:
    """Everything firmware needs from the design, SI units, as plain JSON-ready data."""
    from .device import Device
    device = Device.from_scenario(scenario)
    p = balance_lqr_params(scenario)
    des = _design(scenario, device, p)
    return {
        "scenario": scenario.source,
        "state": [{"name": n, "unit": u} for n, u in zip(STATE_NAMES, STATE_UNITS)],
        "input": {"name": "voltage", "unit": "V", "limit_v": device.supply_v},
        "sign_convention": SIGN_CONVENTION,
        "continuous": [float(k) for k in des.K_continuous],
        "discrete": [float(k) for k in des.K_discrete],
        "gain_units": ["V/rad", "V s/rad", "V s/rad"],
        "rate_hz": device.control_rate_hz,
        "period_s": des.period_s,
        "closed_loop_poles": {"continuous_rad_s": _complex_list(des.poles_continuous),
                              "discrete_z": _complex_list(des.poles_discrete)},
        "weights": _weights(device, p, des),
        "delay": _delay(device, des),
        "model": {"A": des.A.tolist(), "B": des.B.ravel().tolist(), "Ad": des.Ad.tolist(), "Bd": des.Bd.ravel().tolist()},
        "caution": CAUTION,
    }


def _design(scenario, device, p):
    """The LQR design, or InputError in one line when the scenario has none (e.g. gravity 0 without
    friction leaves the total angular momentum unchangeable, so the state is not stabilisable; or
    weights so large or small that the Riccati equations have no finite solution)."""
    import warnings
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):  # the one line below says it all
            warnings.simplefilter("ignore")
            des = design_lqr(device, weights=p.weights, effort=p.effort)
            DelayPredictor(des, delay_s=device.delay_s)
    except (np.linalg.LinAlgError, ValueError, ArithmeticError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{scenario.source}: strategy: no LQR design exists for this scenario ({reason}); check "
                         f"world.gravity (now {device_gravity(scenario):g} m/s^2) and strategy weights/effort") from None
    if not all(np.isfinite(des.K_discrete)) or not all(np.isfinite(des.K_continuous)):
        raise InputError(f"{scenario.source}: strategy: the LQR design gave non-finite gains; check strategy weights/effort")
    return des


def device_gravity(scenario) -> float:
    return float(scenario.world.gravity)


def _complex_list(values) -> list[dict]:
    return [{"re": float(v.real), "im": float(v.imag)} for v in sorted(np.asarray(values), key=lambda z: (z.real, z.imag))]


def _weights(device, p, des) -> dict:
    q0, r0 = bryson_weights(device)
    rule = "Bryson's rule" if p.weights is None and p.effort is None else "scenario (strategy.weights / strategy.effort)"
    return {"state": np.diag(des.Q).tolist(), "state_units": ["1/rad^2", "s^2/rad^2", "s^2/rad^2"],
            "effort": des.R, "effort_unit": "1/V^2", "source": rule,
            "bryson_limits": {"angle_rad": float(1 / math.sqrt(q0[0])), "body_rate_rad_s": float(1 / math.sqrt(q0[1])),
                              "wheel_speed_rad_s": float(1 / math.sqrt(q0[2])), "voltage_v": float(1 / math.sqrt(r0))}}


def _delay(device, des) -> dict:
    if device.delay_s <= 0:
        return {"delay_s": 0.0, "handling": "none needed: the gains act on the measured state"}
    pred = DelayPredictor(des, delay_s=device.delay_s)
    return {
        "delay_s": device.delay_s, "whole_periods": pred.n, "fraction_s": device.delay_s - pred.n * des.period_s,
        "handling": ("the gains act on the present state predicted from the delayed measurement: "
                     "x = Ad^n (Phi_f x_meas + Gam_f u[k-n-1]) + sum of Ad^(n-1-i) Bd u[k-n+i], with the "
                     "commands actually applied since; equivalent to LQR on the delay-augmented state"),
        "Phi_f": pred.Phi_f.tolist(), "Gam_f": pred.Gam_f.tolist(),
    }


def to_json(report: dict) -> str:
    return json.dumps(report, indent=2)


def to_c_header(report: dict) -> str:
    """A small C header: the discrete gains for the firmware loop, the rest for reference."""
    def arr(values) -> str:
        return "{" + ", ".join(_c_float(v) for v in np.ravel(values)) + "}"

    units = ", ".join(f"{s['name']} [{s['unit']}]" for s in report["state"])
    d = report["delay"]
    poles = ", ".join(f"{z['re']:.6g}{z['im']:+.6g}i" for z in report["closed_loop_poles"]["discrete_z"])
    lines = [
        "/* Balance gains generated by wheelbench from " + report["scenario"].replace("*/", "* /") + ".",
        " * " + report["sign_convention"] + ".",
        f" * State x = {units}. Gains in V/rad, V s/rad, V s/rad.",
        f" * Weights: Q = diag({', '.join(f'{q:.6g}' for q in report['weights']['state'])}), "
        f"R = {report['weights']['effort']:.6g} 1/V^2 ({report['weights']['source']}).",
        f" * Discrete closed-loop poles (z): {poles}.",
        f" * Sensor delay {d['delay_s']:.6g} s: {d['handling']}.",
        " * " + CAUTION,
        " */",
        "#ifndef WHEELBENCH_GAINS_H",
        "#define WHEELBENCH_GAINS_H",
        "",
        f"#define WB_RATE_HZ {_c_float(report['rate_hz'])}      /* control loop rate, Hz */",
        f"#define WB_PERIOD_S {_c_float(report['period_s'])}     /* control period, s */",
        f"#define WB_SUPPLY_V {_c_float(report['input']['limit_v'])}     /* clamp the command to +-supply, V */",
        f"#define WB_DELAY_S {_c_float(d['delay_s'])}      /* sensor delay the design assumed, s */",
        "",
        "/* discrete-time gains at WB_RATE_HZ (zero-order hold): voltage = -(K[0]*angle + K[1]*rate + K[2]*wheel) */",
        f"static const float WB_K_DISCRETE[3] = {arr(report['discrete'])};",
        "/* continuous-time gains, for reference */",
        f"static const float WB_K_CONTINUOUS[3] = {arr(report['continuous'])};",
        "",
        *_c_predictor(report, arr),
        "#endif /* WHEELBENCH_GAINS_H */",
    ]
    return "\n".join(lines) + "\n"


def _c_float(v: float) -> str:
    """A C float literal: always with a decimal point or exponent (500 -> 500.0f)."""
    text = f"{float(v):.9g}"
    if not any(ch in text for ch in ".eEn"):
        text += ".0"
    return text + "f"


def _c_predictor(report: dict, arr) -> list[str]:
    """The delay predictor's matrices (row-major), when the design has a sensor delay."""
    d = report["delay"]
    if d["delay_s"] <= 0:
        return []
    m = report["model"]
    return [
        "/* delay predictor (see the comment at the top); matrices row-major, state units as above */",
        f"#define WB_DELAY_WHOLE_PERIODS {d['whole_periods']}",
        f"static const float WB_AD[9] = {arr(m['Ad'])};      /* state transition over one period */",
        f"static const float WB_BD[3] = {arr(m['Bd'])};      /* input over one period, per V */",
        f"static const float WB_PHI_F[9] = {arr(d['Phi_f'])};   /* transition over the fractional delay */",
        f"static const float WB_GAM_F[3] = {arr(d['Gam_f'])};   /* input over the fractional delay, per V */",
        "",
    ]
