"""Gains for firmware: the balance strategy's LQR design as JSON or as a C header.

The numbers are the ones the simulator runs (`sim.strategies.lqr_design.design_lqr`), so a firmware loop
fed the same state in the same units and signs does what the simulation did. Conventions:
state x = [angle rad (0 upright), body rate rad/s, wheel speed rad/s relative to the body],
voltage = -K x, positive voltage accelerates the wheel positively and turns the body negatively.
"""

from __future__ import annotations

import json
import math

import numpy as np

from ..core.errors import InputError
from ..strategies.lqr_design import STATE_NAMES, STATE_UNITS, DelayPredictor, bryson_weights, design_lqr

SIGN_CONVENTION = ("voltage = -K x; angle 0 = upright (right-hand rule about the pivot axis); wheel speed "
                   "relative to the body; positive voltage accelerates the wheel positively and turns the body "
                   "negatively")
CAUTION = ("Model-based gains: bring them up on a guarded rig with a software wheel-speed limit and a "
           "hardware stop, at reduced supply first. A spinning wheel can burst; follow local codes and "
           "licensed practice.")


def balance_spec(scenario):
    """The scenario's balance law (a supervisor's `balance`) as (law, spec): law 'lqr' or 'pid'.

    InputError naming the strategy when the balance law is neither (a plug-in's gains are its own).
    """
    from ..strategies.lqr import LqrBalance
    from ..strategies.pid import PidBalance
    spec = scenario.strategy
    balance = getattr(spec.params, "balance", None)
    if balance is not None and hasattr(balance, "cls"):   # a supervisor: export its balance law
        spec = balance
    for law, cls in (("lqr", LqrBalance), ("pid", PidBalance)):
        if isinstance(spec.cls, type) and issubclass(spec.cls, cls):
            return law, spec
    raise InputError(f"{scenario.source}: strategy: the balance law is {spec.kind!r}, which has no gains to export; "
                     f"gains are exported for the built-in 'lqr' and 'pid' laws (alone or as swing_and_catch's balance)")


def balance_lqr_params(scenario):
    """The LQR parameters of the scenario's balance law; InputError when it is not LQR."""
    law, spec = balance_spec(scenario)
    if law != "lqr":
        raise InputError(f"{scenario.source}: strategy: the balance law is {spec.kind!r}, which has no LQR design")
    return spec.params


def gains_report(scenario) -> dict:
    """Everything firmware needs from the balance law's design, SI units, as plain JSON-ready data."""
    from ..model.device import Device
    device = Device.from_scenario(scenario)
    if device.drive_mode == "current":
        raise InputError(f"{scenario.source}: drive.mode: gains are written for voltage-mode laws only; a current-mode "
                         "law's gains are in amps (run the scenario to use them; `gains` does not write them yet)")
    law, spec = balance_spec(scenario)
    if law == "pid":
        return pid_report(scenario, device, spec)
    p = spec.params
    des = _design(scenario, device, p)
    from ..strategies.lqr import LqrBalance
    gx, gu = LqrBalance.folded_gains(des, DelayPredictor(des, delay_s=device.delay_s))
    return {
        "law": "lqr",
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
        "folded": {"on_reading": list(gx), "on_held_commands": list(gu),
                   "meaning": ("K times the delay predictor: voltage = -(on_reading . [angle, body rate, wheel speed]"
                               " + on_held_commands . [u(k-n-1), ..., u(k-1)]), the commands as applied (clamped)")},
        "starting_values": starting_values(device),
        "model": {"A": des.A.tolist(), "B": des.B.ravel().tolist(), "Ad": des.Ad.tolist(), "Bd": des.Bd.ravel().tolist()},
        "caution": CAUTION,
    }


def starting_values(device) -> dict:
    """Model-based figures to start tuning from, SI, with what each means (torque model near upright,
    back-EMF neglected: J theta_dd = mbar g theta - (k_t / R) V)."""
    c = device.k_t_n_m_a / device.resistance_ohm
    mgd = device.gravity_torque_coeff_n_m
    return {
        "kp_just_holds_gravity_v_per_rad": mgd / c,
        "kp_just_holds_gravity_meaning": ("kp must exceed mbar g R / k_t: below it the motor's torque per radian of "
                                          "lean is smaller than gravity's and the body falls whatever kd does"),
        "open_loop_pole_rad_s": device.open_loop_pole_rad_s,
        "open_loop_pole_meaning": "sqrt(mbar g / J): how fast a small lean grows without control; the loop must be faster",
        "torque_per_volt_n_m_per_v": c,
        "largest_holdable_angle_rad": device.holdable_angle_rad,
    }


PID_TERMS = {
    "kp": ("V/rad", "pushes back against the lean; above kp_just_holds_gravity it can hold the body up"),
    "ki": ("V/(rad s)", "removes a steady angle error; it cannot remove a sensor bias, which it turns into wheel "
                        "acceleration"),
    "kd": ("V s/rad", "damps the swing on the body rate; too little and the catch overshoots and rings"),
    "wheel_kp": ("rad per rad/s", "leans the set-point against the wheel speed, bleeding it: without it the wheel "
                                  "creeps to its limit under any sensor bias"),
    "wheel_ki": ("rad per rad", "removes the wheel speed that wheel_kp leaves"),
}


def pid_report(scenario, device, spec) -> dict:
    """The PID law's gains in use (scenario or model-based defaults), units and what each does."""
    from ..strategies.pid import default_pd_gains
    p = spec.params
    defaults = dict(zip(("kp", "ki", "kd"), default_pd_gains(device)))
    gains = {}
    for name, (unit, meaning) in PID_TERMS.items():
        given = getattr(p, name)
        value = defaults[name] if given is None else given
        source = ("scenario" if name in p.model_fields_set else
                  "default (model-based)" if given is None else "default (off)")
        gains[name] = {"value": float(value), "unit": unit, "source": source, "does": meaning}
    ki = gains["ki"]["value"]
    return {
        "law": "pid",
        "scenario": scenario.source,
        "sign_convention": ("voltage = kp e + ki integral(e) + kd rate, e = angle - angle_ref, angle_ref = "
                            "-(wheel_kp w + wheel_ki integral(w)); " + SIGN_CONVENTION.split("; ", 1)[1]),
        "gains": gains,
        "input": {"name": "voltage", "unit": "V", "limit_v": device.supply_v},
        "rate_hz": device.control_rate_hz,
        "period_s": 1.0 / device.control_rate_hz,
        "integral_limit_rad_s": device.supply_v / ki if ki > 0 else None,
        "defaults_rule": ("angle loop placed at twice the open-loop pole with damping 0.7, ki = kp wn / 20, no "
                          "wheel loop (sim.strategies.pid.default_pd_gains)"),
        "starting_values": starting_values(device),
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
    if np.max(np.abs(des.poles_discrete)) >= 1.0 - 1e-9:
        # a Riccati solution can exist with a mode the input cannot move (zero gravity: the total
        # angular momentum); the loop then does not settle, which is no balance design
        raise InputError(f"{scenario.source}: strategy: no LQR design stabilises this scenario (a closed-"
                         f"loop pole at |z| = {np.max(np.abs(des.poles_discrete)):.6g}); check world.gravity (now "
                         f"{device_gravity(scenario):g} m/s^2) and strategy weights/effort")
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


def to_text(report: dict) -> str:
    """The gains for a person: values with units, what each term does, the model-based starting values."""
    sv = report["starting_values"]
    lines = [f"balance law: {report['law']} at {report['rate_hz']:g} Hz ({report['scenario']})",
             f"sign convention: {report['sign_convention']}"]
    if report["law"] == "lqr":
        names = [f"{s['name']} [{s['unit']}]" for s in report["state"]]
        for name, k, unit in zip(names, report["discrete"], report["gain_units"]):
            lines.append(f"  K on {name:22s} {k:12.6g} {unit}")
        lines.append(f"  weights: {report['weights']['source']}; sensor delay {report['delay']['delay_s']:g} s")
    else:
        for name, g in report["gains"].items():
            lines.append(f"  {name:9s} {g['value']:12.6g} {g['unit']:14s} {g['source']}: {g['does']}")
    lines += ["starting values (torque model near upright, back-EMF neglected):",
              f"  kp just holding gravity  {sv['kp_just_holds_gravity_v_per_rad']:.6g} V/rad: "
              f"{sv['kp_just_holds_gravity_meaning']}",
              f"  open-loop pole           {sv['open_loop_pole_rad_s']:.6g} rad/s: {sv['open_loop_pole_meaning']}",
              f"  largest holdable angle   {math.degrees(sv['largest_holdable_angle_rad']):.3g} deg "
              "(asin of stall torque over mbar g)",
              report["caution"]]
    return "\n".join(lines) + "\n"


def to_json(report: dict) -> str:
    return json.dumps(report, indent=2)


def to_c_header(report: dict) -> str:
    """A small C header: the balance law's numbers and a reference function running the law.

    `wb_balance_volts` is the law exactly as the simulator runs it (for LQR: the discrete gains
    with the delay predictor folded in, on the reading and on the commands held; for PID: the
    integrators with anti-windup and the wheel-speed loop), in double precision by default
    (`#define WB_REAL float` before including it for a float-only microcontroller).
    """
    d = report.get("delay", {"delay_s": 0.0, "handling": "none needed"})
    lines = [
        *c_opening(report, [
            " * " + report["sign_convention"].replace("*/", "* /") + ".",
            *_c_law_comment(report),
            f" * Sensor delay {d['delay_s']:.6g} s: {d['handling']}.",
            " * Starting values: kp must exceed "
            f"{report['starting_values']['kp_just_holds_gravity_v_per_rad']:.6g} V/rad (mbar g R / k_t) to hold gravity;",
            f" * open-loop pole {report['starting_values']['open_loop_pole_rad_s']:.6g} rad/s (sqrt(mbar g / J))."]),
        f"#define WB_SUPPLY_V {_c_float(report['input']['limit_v'])}     /* clamp the command to +-supply, V */",
        f"#define WB_DELAY_S {_c_float(d['delay_s'])}      /* sensor delay the design assumed, s */",
        "",
        *(_c_lqr(report) if report["law"] == "lqr" else _c_pid(report)),
        "#endif /* WHEELBENCH_GAINS_H */",
    ]
    return "\n".join(lines) + "\n"


def c_opening(report: dict, comment: list[str]) -> list[str]:
    """A header's opening: where it comes from, the `comment` lines, the caution, the include guard,
    the loop rate and period (shared with the multi-wheel header, `sim.studies.gains_multi`)."""
    return ["/* Balance gains generated by wheelbench from " + report["scenario"].replace("*/", "* /") + ".",
            *comment,
            " * " + CAUTION,
            " */",
            "#ifndef WHEELBENCH_GAINS_H",
            "#define WHEELBENCH_GAINS_H",
            "",
            f"#define WB_RATE_HZ {_c_float(report['rate_hz'])}      /* control loop rate, Hz */",
            f"#define WB_PERIOD_S {_c_float(report['period_s'])}     /* control period, s */"]


def _c_law_comment(report: dict) -> list[str]:
    if report["law"] == "lqr":
        units = ", ".join(f"{s['name']} [{s['unit']}]" for s in report["state"])
        poles = ", ".join(f"{z['re']:.6g}{z['im']:+.6g}i" for z in report["closed_loop_poles"]["discrete_z"])
        return [f" * State x = {units}. Gains in V/rad, V s/rad, V s/rad.",
                f" * Weights: Q = diag({', '.join(f'{q:.6g}' for q in report['weights']['state'])}), "
                f"R = {report['weights']['effort']:.6g} 1/V^2 ({report['weights']['source']}).",
                f" * Discrete closed-loop poles (z): {poles}."]
    return [f" * {name} = {g['value']:.9g} {g['unit']} ({g['source']}): {g['does']}."
            for name, g in report["gains"].items()]


_C_REAL = ["#ifndef WB_REAL",
           "#define WB_REAL double   /* arithmetic of the reference function; define as float before including */",
           "#endif", ""]


def _c_arr(values, fmt) -> str:
    return "{" + ", ".join(fmt(v) for v in np.ravel(values)) + "}"


def _c_clamp_lines() -> list[str]:
    return ["    if (v > (WB_REAL)WB_SUPPLY_V_EXACT) v = (WB_REAL)WB_SUPPLY_V_EXACT;",
            "    else if (v < -(WB_REAL)WB_SUPPLY_V_EXACT) v = -(WB_REAL)WB_SUPPLY_V_EXACT;"]


def _c_lqr(report: dict) -> list[str]:
    gx, gu = report["folded"]["on_reading"], report["folded"]["on_held_commands"]
    n = len(gu)
    out = [
        "/* discrete-time gains at WB_RATE_HZ (zero-order hold): voltage = -(K[0]*angle + K[1]*rate + K[2]*wheel) */",
        f"static const float WB_K_DISCRETE[3] = {_c_arr(report['discrete'], _c_float)};",
        "/* continuous-time gains, for reference */",
        f"static const float WB_K_CONTINUOUS[3] = {_c_arr(report['continuous'], _c_float)};",
        "",
        *_c_predictor(report),
        *_C_REAL,
        f"#define WB_SUPPLY_V_EXACT {_c_double(report['input']['limit_v'])}",
        f"#define WB_HELD_COMMANDS {n}   /* commands the delay predictor remembers (0: no delay) */",
        "/* the law with the predictor folded in: gains on the reading, and on the held commands, oldest first */",
        f"static const WB_REAL WB_GAIN_ON_READING[3] = {_c_arr(gx, _c_double)};",
    ]
    if n:
        out.append(f"static const WB_REAL WB_GAIN_ON_HELD[{n}] = {_c_arr(gu, _c_double)};")
    out += [
        f"typedef struct {{ {'WB_REAL held[WB_HELD_COMMANDS];' if n else 'int unused;'} }} wb_balance_state_t;",
        "",
        "/* start of a balance phase: no commands held */",
        "static inline void wb_balance_reset(wb_balance_state_t *s) {",
        *(["    for (int i = 0; i < WB_HELD_COMMANDS; ++i) s->held[i] = 0;"] if n else ["    s->unused = 0;"]),
        "}",
        "",
        "/* one control tick: the readings (rad, rad/s, rad/s) in, the voltage to apply out (clamped to the supply) */",
        "static inline WB_REAL wb_balance_volts(wb_balance_state_t *s, WB_REAL angle_rad, WB_REAL rate_rad_s,",
        "                                       WB_REAL wheel_speed_rad_s) {",
        "    WB_REAL v = -(WB_GAIN_ON_READING[0] * angle_rad + WB_GAIN_ON_READING[1] * rate_rad_s",
        "                  + WB_GAIN_ON_READING[2] * wheel_speed_rad_s);",
    ]
    if n:
        out.append("    for (int i = 0; i < WB_HELD_COMMANDS; ++i) v -= WB_GAIN_ON_HELD[i] * s->held[i];")
    out += _c_clamp_lines()
    if n:
        out += ["    for (int i = 0; i + 1 < WB_HELD_COMMANDS; ++i) s->held[i] = s->held[i + 1];",
                "    s->held[WB_HELD_COMMANDS - 1] = v;"]
    else:
        out.append("    (void)s;")
    return out + ["    return v;", "}", ""]


def _c_pid(report: dict) -> list[str]:
    g = {k: v["value"] for k, v in report["gains"].items()}
    limit = report["integral_limit_rad_s"]
    return [
        *_C_REAL,
        f"#define WB_SUPPLY_V_EXACT {_c_double(report['input']['limit_v'])}",
        *[f"static const WB_REAL WB_{k.upper()} = {_c_double(v)};   /* {report['gains'][k]['unit']} */"
          for k, v in g.items()],
        f"static const WB_REAL WB_PERIOD = {_c_double(report['period_s'])};   /* s */",
        f"static const WB_REAL WB_INTEGRAL_LIMIT = {_c_double(limit if limit is not None else 0.0)};   /* rad s "
        f"(anti-windup: ki * limit = supply){'; 0: no limit' if limit is None else ''} */",
        "typedef struct { WB_REAL int_angle, int_wheel; } wb_balance_state_t;",
        "",
        "static inline void wb_balance_reset(wb_balance_state_t *s) { s->int_angle = 0; s->int_wheel = 0; }",
        "",
        "/* one control tick: the readings (rad, rad/s, rad/s) in, the voltage to apply out (clamped to the supply) */",
        "static inline WB_REAL wb_balance_volts(wb_balance_state_t *s, WB_REAL angle_rad, WB_REAL rate_rad_s,",
        "                                       WB_REAL wheel_speed_rad_s) {",
        "    WB_REAL ref = 0;",
        "    if (WB_WHEEL_KP != 0 || WB_WHEEL_KI != 0) {",
        "        s->int_wheel += wheel_speed_rad_s * WB_PERIOD;",
        "        ref = -(WB_WHEEL_KP * wheel_speed_rad_s + WB_WHEEL_KI * s->int_wheel);",
        "    }",
        "    WB_REAL e = angle_rad - ref;",
        "    s->int_angle += e * WB_PERIOD;",
        "    if (WB_INTEGRAL_LIMIT > 0) {",
        "        if (s->int_angle > WB_INTEGRAL_LIMIT) s->int_angle = WB_INTEGRAL_LIMIT;",
        "        else if (s->int_angle < -WB_INTEGRAL_LIMIT) s->int_angle = -WB_INTEGRAL_LIMIT;",
        "    }",
        "    WB_REAL v = WB_KP * e + WB_KI * s->int_angle + WB_KD * rate_rad_s;",
        *_c_clamp_lines(),
        "    return v;",
        "}",
        "",
    ]


def _c_double(v: float) -> str:
    """A C double literal that reads back to the same binary value (17 significant digits)."""
    text = repr(float(v))
    return text if any(ch in text for ch in ".eEn") else text + ".0"


def _c_float(v: float) -> str:
    """A C float literal: always with a decimal point or exponent (500 -> 500.0f)."""
    text = f"{float(v):.9g}"
    if not any(ch in text for ch in ".eEn"):
        text += ".0"
    return text + "f"


def _c_predictor(report: dict) -> list[str]:
    """The delay predictor's matrices (row-major), when the design has a sensor delay."""
    d = report["delay"]
    if d["delay_s"] <= 0:
        return []
    m = report["model"]

    def arr(values) -> str:
        return _c_arr(values, _c_float)
    return [
        "/* delay predictor (see the comment at the top); matrices row-major, state units as above */",
        f"#define WB_DELAY_WHOLE_PERIODS {d['whole_periods']}",
        f"static const float WB_AD[9] = {arr(m['Ad'])};      /* state transition over one period */",
        f"static const float WB_BD[3] = {arr(m['Bd'])};      /* input over one period, per V */",
        f"static const float WB_PHI_F[9] = {arr(d['Phi_f'])};   /* transition over the fractional delay */",
        f"static const float WB_GAM_F[3] = {arr(d['Gam_f'])};   /* input over the fractional delay, per V */",
        "",
    ]
