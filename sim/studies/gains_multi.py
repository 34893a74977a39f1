"""Gains for firmware of a multi-wheel device: the LQR design as named matrices, JSON or a C header.

The numbers are the ones the simulator runs (`sim.strategies.lqr_design.design_lqr_spec` and the
`MultiWheelLqr` law), so a firmware loop fed the same state in the same units and signs does what
the simulation did. Every matrix carries its row and column names. Conventions (frames, signs,
states): `sim.model.linear3d`; volts = -K x, one voltage per wheel (rows), one gain per state
(columns); a positive voltage accelerates its wheel positively about its axis.
"""

from __future__ import annotations

import json
import math
import re
import warnings

import numpy as np

from ..core.errors import InputError
from ..model.linear3d import LinearSpec, as_linear_spec, upright_rotation
from ..strategies.lqr_design import (ANGLE_LIMIT_RAD, RATE_LIMIT_RAD_S, WHEEL_SPEED_SHARE, DelayPredictor,
                                     bryson_limits, design_lqr_spec, state_kind)
from .gains import CAUTION, _c_double, _c_float, c_opening

SIGN_CONVENTION = ("volts = -K x, one row per wheel; tilt_x, tilt_y: rotations about world x and y from upright "
                   "(right-hand rule); angle: about the hinge (body x); rates: the body's angular velocity in the "
                   "world frame; wheel speeds relative to the body about each wheel's axis; positive voltage "
                   "accelerates a wheel positively and turns the body the other way")
# a current-mode (torque-mode) drive: the law answers in amps, the gains in A per state unit
SIGN_CONVENTION_CURRENT = (SIGN_CONVENTION.replace("volts = -K x", "amps = -K x (one current per wheel, for a "
                                                   "torque-mode driver's current loop)")
                           .replace("positive voltage", "positive current"))


def named(matrix, rows, columns) -> dict:
    """A matrix as JSON data with its row and column names."""
    return {"rows": list(rows), "columns": list(columns), "values": np.asarray(matrix, dtype=float).tolist()}


def multi_gains_report(spec: LinearSpec, *, source: str, weights=None, effort=None) -> dict:
    """Everything firmware needs from a multi-wheel LQR design, SI units, as plain JSON-ready data.

    InputError in one line when no stabilising design exists (e.g. no gravity and no friction, or
    weights so extreme that the Riccati equations have no finite solution).
    """
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            des = design_lqr_spec(spec, weights=weights, effort=effort)
            pred = DelayPredictor(des, delay_s=spec.delay_s)
    except (np.linalg.LinAlgError, ValueError, ArithmeticError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise InputError(f"{source}: strategy: no LQR design exists for this device ({reason}); check "
                         f"world.gravity (now {spec.gravity_m_s2:g} m/s^2) and strategy weights/effort") from None
    radius = float(np.max(np.abs(des.poles_discrete)))
    if not np.all(np.isfinite(des.K_discrete)) or radius >= 1.0 - 1e-9:
        raise InputError(f"{source}: strategy: no LQR design stabilises this device (a closed-loop pole at "
                         f"|z| = {radius:.6g}); check world.gravity and strategy weights/effort")
    states, inputs = des.state_names, des.input_names
    units = [("rad" if state_kind(s) == 0 else "rad/s") for s in states]
    current = getattr(spec, "drive_mode", "voltage") == "current"
    u = "A" if current else "V"
    x_max, u_max = bryson_limits(spec, spec.linear_model())
    G_x, G_u = pred.folded_gains(des.K_discrete)
    held = [f"u[k-{pred.n + 1 - i}]" for i in range(len(G_u))]
    return {
        "law": "lqr",
        "scenario": source,
        "mount": "floor" if getattr(spec, "floor", None) is not None else spec.mount,
        # a body on the floor is designed as on a hinge at its balance edge or a ball at its corner
        **({"design_mount": spec.mount} if getattr(spec, "floor", None) is not None else {}),
        **({"drive_mode": "current"} if current else {}),
        "state": [{"name": s, "unit": unit} for s, unit in zip(states, units)],
        "input": ([{"name": name, "unit": "A", "limit_a": lim} for name, lim in zip(inputs, u_max.tolist())] if current
                  else [{"name": name, "unit": "V", "limit_v": w.supply_v} for name, w in zip(inputs, spec.wheels)]),
        "sign_convention": SIGN_CONVENTION_CURRENT if current else SIGN_CONVENTION,
        "upright_rotation": named(upright_rotation(spec), ("world_x", "world_y", "world_z"),
                                  ("body_x", "body_y", "body_z")),
        "discrete": named(des.K_discrete, inputs, states),
        "continuous": named(des.K_continuous, inputs, states),
        "gain_units": [f"{u}/rad" if unit == "rad" else f"{u} s/rad" for unit in units],
        "rate_hz": spec.control_rate_hz,
        "period_s": des.period_s,
        "closed_loop_poles": {"continuous_rad_s": _complex_list(des.poles_continuous),
                              "discrete_z": _complex_list(des.poles_discrete)},
        "conserved": {**named(des.conserved, [f"conserved{i + 1}" for i in range(des.conserved.shape[0])], states),
                      "meaning": ("combinations of the state that no command can change (e.g. the angular momentum "
                                  "about the vertical on a frictionless ball mount); the gains act on the rest and "
                                  "the poles above are the rest's")},
        "weights": {"state": dict(zip(states, np.diag(des.Q).tolist())),
                    "effort": dict(zip(inputs, np.diag(des.R).tolist())),
                    "source": ("Bryson's rule" if weights is None and effort is None
                               else "scenario (strategy.weights / strategy.effort)"),
                    "bryson_limits": {**dict(zip(states, x_max.tolist())), **dict(zip(inputs, u_max.tolist()))},
                    **({"effort_unit": "1/A^2"} if current else {}),
                    "bryson_rule": (f"angles {math.degrees(ANGLE_LIMIT_RAD):g} deg, body rates {RATE_LIMIT_RAD_S:g} "
                                    f"rad/s, wheel speeds {WHEEL_SPEED_SHARE:g} of each no-load speed, each "
                                    + ("wheel's current limit (or stall current)" if current else "wheel's supply"))},
        "delay": {
            "delay_s": spec.delay_s, "whole_periods": pred.n if pred.active else 0,
            "fraction_s": spec.delay_s - pred.n * des.period_s if pred.active else 0.0,
            "handling": ("the gains act on the present state predicted from the delayed measurement and the "
                         f"commands applied since (clamped to each {'current limit' if current else 'supply'}); "
                         "equivalent to LQR on the "
                         "delay-augmented state" if pred.active else "none needed: the gains act on the measured state"),
        },
        "folded": {"on_reading": named(G_x, inputs, states),
                   "on_held_commands": [named(G, inputs, inputs) | {"command": h} for G, h in zip(G_u, held)],
                   "meaning": (f"{'amps' if current else 'volts'} = -(on_reading x_measured + sum over the held "
                               "commands, oldest first, of on_held_commands u), the commands as applied (clamped)")},
        "model": {"A": named(des.A, states, states), "B": named(des.B, states, inputs),
                  "Ad": named(des.Ad, states, states), "Bd": named(des.Bd, states, inputs)},
        "caution": CAUTION,
    }


def device_gains_report(device, *, source: str, params=None) -> dict:
    """`multi_gains_report` of a multi-wheel device (anything with `linear_spec()` giving a LinearSpec
    or a mapping of its fields) with the `lqr` law's parameters (`weights`, `effort`; None: Bryson)."""
    spec = as_linear_spec(device.linear_spec())
    return multi_gains_report(spec, source=source, weights=getattr(params, "weights", None),
                              effort=getattr(params, "effort", None))


def _complex_list(values) -> list[dict]:
    return [{"re": float(v.real), "im": float(v.imag)} for v in sorted(np.asarray(values), key=lambda z: (z.real, z.imag))]


def to_json(report: dict) -> str:
    return json.dumps(report, indent=2)


def to_text(report: dict) -> str:
    """The gain matrix for a person: one row per wheel, one column per state, with units."""
    K = report["discrete"]
    width = max(12, *(len(c) for c in K["columns"]))
    lines = [f"balance law: lqr, {len(K['rows'])} wheels, {_mount_text(report)}, at {report['rate_hz']:g} Hz "
             f"({report['scenario']})", f"sign convention: {report['sign_convention']}",
             f"discrete gains K ({_quantity(report)} = -K x):",
             " " * 16 + "".join(f"{c:>{width + 1}s}" for c in K["columns"]),
             " " * 16 + "".join(f"{'[' + u + ']':>{width + 1}s}" for u in report["gain_units"])]
    for name, row in zip(K["rows"], K["values"]):
        lines.append(f"  {name:14s}" + "".join(f"{v:>{width + 1}.6g}" for v in row))
    lines += [f"  weights: {report['weights']['source']}; sensor delay {report['delay']['delay_s']:g} s",
              report["caution"]]
    return "\n".join(lines) + "\n"


def _c_name(name: str) -> str:
    return re.sub(r"[^A-Z0-9]", "_", name.upper())


def _c_matrix(values, fmt) -> str:
    return "{" + ", ".join("{" + ", ".join(fmt(v) for v in row) + "}" for row in values) + "}"


def _quantity(report: dict) -> str:
    """What the law answers in: "amps" for a current-mode drive, else "volts"."""
    return "amps" if report.get("drive_mode") == "current" else "volts"


def to_c_header(report: dict) -> str:
    """A C header: the named gain matrices and `wb_balance_volts`, the law exactly as the simulator
    runs it (discrete gains with the delay predictor folded in, each command clamped to its wheel's
    supply), in double precision unless WB_REAL is defined as float before including it. For a
    current-mode drive the function is `wb_balance_amps` and the clamp `WB_CURRENT_LIMIT_A`."""
    q = _quantity(report)
    limit, limit_key = ("WB_CURRENT_LIMIT_A", "limit_a") if q == "amps" else ("WB_SUPPLY_V", "limit_v")
    K = report["discrete"]
    states, wheels = K["columns"], K["rows"]
    n, m = len(states), len(wheels)
    held = report["folded"]["on_held_commands"]
    h = len(held)
    poles = ", ".join(f"{z['re']:.6g}{z['im']:+.6g}i" for z in report["closed_loop_poles"]["discrete_z"])
    d = report["delay"]
    lines = [
        *c_opening(report, [
            f" * {_mount_text(report)}, {m} wheels. " + report["sign_convention"] + ".",
            " * State x (index: name [unit]): " + ", ".join(f"{i}: {s['name']} [{s['unit']}]"
                                                             for i, s in enumerate(report["state"])) + ".",
            f" * Discrete closed-loop poles (z): {poles}.",
            f" * Sensor delay {d['delay_s']:.6g} s: {d['handling']}."]),
        f"#define WB_DELAY_S {_c_float(d['delay_s'])}      /* sensor delay the design assumed, s */",
        f"#define WB_N_STATES {n}",
        f"#define WB_N_WHEELS {m}",
        *[f"#define WB_X_{_c_name(s)} {i}" for i, s in enumerate(states)],
        *[f"#define WB_U_{_c_name(w)} {j}" for j, w in enumerate(wheels)],
        "",
        "/* discrete-time gains at WB_RATE_HZ (zero-order hold), rows = wheels, columns = states */",
        f"static const float WB_K_DISCRETE[WB_N_WHEELS][WB_N_STATES] = {_c_matrix(K['values'], _c_float)};",
        "/* continuous-time gains, for reference */",
        f"static const float WB_K_CONTINUOUS[WB_N_WHEELS][WB_N_STATES] = "
        f"{_c_matrix(report['continuous']['values'], _c_float)};",
        "",
        "#ifndef WB_REAL",
        "#define WB_REAL double   /* arithmetic of the reference function; define as float before including */",
        "#endif",
        f"static const WB_REAL {limit}[WB_N_WHEELS] = {{{', '.join(_c_double(i[limit_key]) for i in report['input'])}}};",
        f"#define WB_HELD_COMMANDS {h}   /* commands the delay predictor remembers (0: no delay) */",
        "/* the law with the predictor folded in: gains on the reading, and on each held command, oldest first */",
        "static const WB_REAL WB_GAIN_ON_READING[WB_N_WHEELS][WB_N_STATES] = "
        f"{_c_matrix(report['folded']['on_reading']['values'], _c_double)};",
    ]
    if h:
        blocks = ", ".join(_c_matrix(g["values"], _c_double) for g in held)
        lines.append(f"static const WB_REAL WB_GAIN_ON_HELD[WB_HELD_COMMANDS][WB_N_WHEELS][WB_N_WHEELS] = {{{blocks}}};")
    lines += [
        f"typedef struct {{ {'WB_REAL held[WB_HELD_COMMANDS][WB_N_WHEELS];' if h else 'int unused;'} }} wb_balance_state_t;",
        "",
        "/* start of a balance phase: no commands held */",
        "static inline void wb_balance_reset(wb_balance_state_t *s) {",
        ("    for (int i = 0; i < WB_HELD_COMMANDS; ++i) for (int j = 0; j < WB_N_WHEELS; ++j) s->held[i][j] = 0;"
         if h else "    s->unused = 0;"),
        "}",
        "",
        f"/* one control tick: the measured state x (order and units above) in, each wheel's "
        f"{'current' if q == 'amps' else 'voltage'} out (clamped) */",
        f"static inline void wb_balance_{q}(wb_balance_state_t *s, const WB_REAL x[WB_N_STATES], WB_REAL {q}[WB_N_WHEELS]) {{",
        "    for (int j = 0; j < WB_N_WHEELS; ++j) {",
        "        WB_REAL v = 0;",
        "        for (int i = 0; i < WB_N_STATES; ++i) v -= WB_GAIN_ON_READING[j][i] * x[i];",
    ]
    if h:
        lines.append("        for (int k = 0; k < WB_HELD_COMMANDS; ++k) for (int i = 0; i < WB_N_WHEELS; ++i) "
                     "v -= WB_GAIN_ON_HELD[k][j][i] * s->held[k][i];")
    lines += [
        f"        if (v > {limit}[j]) v = {limit}[j];",
        f"        else if (v < -{limit}[j]) v = -{limit}[j];",
        f"        {q}[j] = v;",
        "    }",
    ]
    if h:
        lines += ["    for (int k = 0; k + 1 < WB_HELD_COMMANDS; ++k) for (int j = 0; j < WB_N_WHEELS; ++j) "
                  "s->held[k][j] = s->held[k + 1][j];",
                  f"    for (int j = 0; j < WB_N_WHEELS; ++j) s->held[WB_HELD_COMMANDS - 1][j] = {q}[j];"]
    else:
        lines.append("    (void)s;")
    lines += ["}", "", "#endif /* WHEELBENCH_GAINS_H */"]
    return "\n".join(lines) + "\n"


def _mount_text(report: dict) -> str:
    """"ball mount", or "floor mount (designed as on a hinge at its balance edge)"."""
    if "design_mount" not in report:
        return f"{report['mount']} mount"
    at = "a hinge at its balance edge" if report["design_mount"] == "hinge" else "a ball at its balance corner"
    return f"floor mount (designed as on {at})"
