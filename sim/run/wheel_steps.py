"""The 3D loop's per-step work on its wheels, written out for the device's number of wheels.

Every physics step the 3D trial records each wheel's angle (rad) and speed (rad/s, relative to the
body), checks the speed against its absurd-state limit, steps each wheel's motor on the ideal source
(`sim.physics.motor.MotorDrive.update`: the step's mean current, clamped to the current limit, and
its torque k_t i), records the current (A) and torque (N m), and hands the engine each wheel's net
torque about its axis (the motor's less the bearing's viscous friction b w, N m).

As a loop over one to three wheels in Python, the zip, the unpacking, the method calls and the
appends cost more than the arithmetic (on the three-wheel cube about 26,000 of the trial's own
~80,000 instructions a step). `wheel_records`, `motor_steps` and `command_records` (each tick's
commands) write the code out once per trial for the device's number of wheels (`sim.core.unrolled`),
every motor's coefficients bound as constants: the same operations in the same order as
`MotorDrive.update`, so the very same doubles (tests/test_wheel_steps.py pins the two together, the
current limit's crossing included: that rare step calls `MotorDrive.limited`, the one place its rule
is written).

The motors' end-of-step currents stay in each `MotorDrive.current`, so that code which sets them
(an open winding) and the next step agree.
"""

from __future__ import annotations

from typing import Callable, Sequence

from ..core.unrolled import unrolled
from ..physics.motor import MotorDrive

_RECORD = """
def record(k, angles, speeds):
    {unpack_a} = angles
    {unpack_s} = speeds
{stores}
    return {inside}
"""

_COMMANDS = """
def record(k, volts, open_circuit):
    {unpack_v} = volts
    if open_circuit:
{zeros}
    else:
{stores}
    return {at_supply}
"""

_MOTOR = """
    c = m{j}.current
    i{j} = ci{j} * c + cw{j} * s{j} + cv{j} * v{j}
    e = ei{j} * c + ew{j} * s{j} + ev{j} * v{j}
    if e > lim{j} or e < nlim{j}:
        i{j} = limited{j}(i{j}, e, s{j}, v{j})
    else:
        m{j}.current = e
    if i{j} > lim{j}:
        i{j} = lim{j}
    elif i{j} < nlim{j}:
        i{j} = nlim{j}
    t{j} = kt{j} * i{j}
    current{j}[k] = i{j}
    torque{j}[k] = t{j}"""

_DRIVE = """
def drive(k, volts, speeds):
    {unpack_v} = volts
    {unpack_s} = speeds
{motors}
    return ({nets},)
"""


def wheel_records(*, speed_limits_rad_s: Sequence[float], angle_columns, speed_columns) -> Callable:
    """`record(k, angles, speeds) -> bool`: stores each wheel's angle (rad) and speed (rad/s) at row k
    of its columns (sequences supporting item assignment by row, one per wheel); true when every speed
    lies strictly inside its limit (rad/s; false for NaN)."""
    n = len(speed_limits_rad_s)
    _same_length(n, angle_columns, speed_columns)
    names: dict[str, object] = {}
    for j in range(n):
        names.update({f"L{j}": speed_limits_rad_s[j], f"nL{j}": -speed_limits_rad_s[j], f"angle{j}": angle_columns[j], f"speed{j}": speed_columns[j]})
    source = _RECORD.format(
        unpack_a=_unpack("a", n), unpack_s=_unpack("s", n),
        stores="\n".join(f"    angle{j}[k] = a{j}\n    speed{j}[k] = s{j}" for j in range(n)),
        inside=" and ".join(f"nL{j} < s{j} < L{j}" for j in range(n)))
    return unrolled(source, names, f"records of {n} wheels")["record"]


def command_records(*, at_supply_v: float, voltage_columns) -> Callable:
    """`record(k, volts, open_circuit) -> bool`: stores each wheel's command (V, or A in current mode;
    0 with the winding open) at row k of its column; true when any command is at or past
    `at_supply_v` in size (the tick counts as saturated)."""
    n = len(voltage_columns)
    _same_length(n, voltage_columns)
    names = {"hi": at_supply_v, "lo": -at_supply_v, **{f"voltage{j}": c for j, c in enumerate(voltage_columns)}}
    source = _COMMANDS.format(
        unpack_v=_unpack("v", n), zeros="\n".join(f"        voltage{j}[k] = 0.0" for j in range(n)),
        stores="\n".join(f"        voltage{j}[k] = v{j}" for j in range(n)),
        at_supply=" or ".join(f"v{j} >= hi or v{j} <= lo" for j in range(n)))
    return unrolled(source, names, f"commands of {n} wheels")["record"]


def motor_steps(motors: Sequence[MotorDrive], *, viscous_n_m_s: Sequence[float], current_columns,
                torque_columns) -> Callable:
    """`drive(k, volts, speeds) -> tuple`: steps each motor (one `MotorDrive` per wheel, on the ideal
    source) with its volts held over the step at its wheel's speed (rad/s), stores its mean current
    (A) and torque (N m) at row k, and returns each wheel's net torque (N m): torque less its
    bearing's viscous friction (`viscous_n_m_s`, N m s/rad) times the speed."""
    n = len(motors)
    _same_length(n, viscous_n_m_s, current_columns, torque_columns)
    names: dict[str, object] = {}
    for j, m in enumerate(motors):
        (names[f"ci{j}"], names[f"cw{j}"], names[f"cv{j}"]), (names[f"ei{j}"], names[f"ew{j}"], names[f"ev{j}"]) = (
            m.mean, m.end)
        names.update({f"m{j}": m, f"lim{j}": m.i_max, f"nlim{j}": -m.i_max, f"kt{j}": m.k_t, f"limited{j}": m.limited,
                      f"b{j}": viscous_n_m_s[j], f"current{j}": current_columns[j], f"torque{j}": torque_columns[j]})
    source = _DRIVE.format(
        unpack_v=_unpack("v", n), unpack_s=_unpack("s", n), motors="".join(_MOTOR.format(j=j) for j in range(n)),
        nets=", ".join(f"t{j} - b{j} * s{j}" for j in range(n)))
    return unrolled(source, names, f"motor steps of {n} wheels")["drive"]


def _same_length(n: int, *args) -> None:
    if not n or any(len(x) != n for x in args):
        raise ValueError(f"one entry per wheel in every argument ({n} wheels)")


def _unpack(prefix: str, n: int) -> str:
    """The targets of unpacking n values: "a0, a1" ("a0," for one)."""
    return ", ".join(f"{prefix}{j}" for j in range(n)) + ("," if n == 1 else "")
