"""Bench tests on a 3D device (`Scenario.is_planar` false): what the one-wheel fits need of it.

The fits (`sim.fit.fit_wheel`, `sim.fit.fit_swing`) read a few lumped figures of a one-wheel device
and write their patch under `motor`, `wheel` and `body`. On a 3D device (one to three wheels on any
axes, a hinge or a ball mount; `sim.model.device3d`):

- spin-up and coast-down are tests of one wheel with the body held: the figures are that wheel's
  (its spin inertia, bearing friction, its motor's resistance), and the patch addresses that wheel,
  `wheels[i]` (i from 0, as in the scenario's list) for its own keys, and its own motor
  `wheels[i].motor` or, when it has none, the shared `motor` (which then changes every wheel that
  shares it: the fit says so). A scenario with the `wheel:` shorthand keeps `wheel` and `motor`.
- free-swing on a hinge is the one-wheel test about the hinge (body frame x): m g d with d the
  centre of mass's distance from the hinge line, and the inertia about the hinge with the wheels'
  spin inertia left out (a free bearing keeps each wheel's spin momentum about its own axis, so
  only its transverse inertia swings with the body; ../shared/references.md, free swing).
- free-swing on a ball mount is refused (`BALL_SWING`): see there why.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..core.errors import InputError

BALL_SWING = ("free-swing on a ball mount is not fitted: hanging from a ball the body swings in two coupled "
              "directions (a 2D pendulum whose modes lie along the principal axes of its inertia about the pivot, "
              "not along a horizontal axis one names), and the scenario's body.inertia_correction acts about body "
              "x only, so a fitted inertia about another axis has no key to patch; swing the body on a hinge rig "
              "(a hinge scenario of the same parts) instead")


@dataclass(frozen=True)
class WheelBench:
    """One wheel of a device as a held-body bench sees it (SI), under the names the fits read.

    `I_w_kg_m2`: spin inertia (rotor included); `resistance_ohm`, `k_e_v_s_rad`: its motor's;
    `wheel_coulomb_n_m`, `wheel_viscous_n_m_s`: its bearing's friction.
    """

    I_w_kg_m2: float
    resistance_ohm: float
    k_e_v_s_rad: float
    wheel_coulomb_n_m: float
    wheel_viscous_n_m_s: float


@dataclass(frozen=True)
class SwingBench:
    """A hinge device swinging about its hinge with its wheels coasting (SI), under the fits' names.

    `mbar_kg_m`: mass times the centre of mass's distance from the hinge line; `J_kg_m2`: the
    inertia about the hinge with the wheels' spin left out; `I_w_kg_m2`: the wheels' spin inertia
    that would swing along if their bearings dragged them (sum of I_s a_x^2); the wheel friction
    figures are the sums over the wheels (any friction there at all is what the fit's note needs).
    """

    mbar_kg_m: float
    gravity_m_s2: float
    J_kg_m2: float
    I_w_kg_m2: float
    wheel_coulomb_n_m: float
    wheel_viscous_n_m_s: float


@dataclass(frozen=True)
class Target:
    """Where a bench fit's patch goes: the key paths (patch-mapping keys, `sim.model.scenario_edit`)
    that take the fit's `wheel` and `motor` sections, and what the terminal should be told."""

    wheel_key: str
    motor_key: str
    note: str | None


def wheel_count(sc) -> int:
    return len(sc.wheel_list)


def pick_wheel(sc, wheel: int | None, *, test: str) -> int:
    """The 0-based index of the wheel a wheel test was taken on; InputError (one line, `--wheel`)
    when a device with several wheels is not told which, or the number is out of range."""
    n = wheel_count(sc)
    if wheel is None:
        if n > 1:
            raise InputError(f"--wheel: {sc.source} has {n} wheels; say which one the {test} log was taken on "
                             f"(--wheel 1 to {n}, in the scenario's order)")
        return 0
    if not 1 <= wheel <= n:
        raise InputError(f"--wheel {wheel}: {sc.source} has {n} wheel{'s' if n > 1 else ''}; expected 1"
                         + (f" to {n}" if n > 1 else ""))
    return wheel - 1


def target(sc, i: int | None) -> Target:
    """Patch keys for wheel i (0-based) of scenario `sc` (None: no scenario, today's keys)."""
    if sc is None or sc.wheels is None:
        return Target("wheel", "motor", None)
    own = getattr(sc.wheels[i], "motor", None) is not None
    shared = [k + 1 for k in range(len(sc.wheels)) if getattr(sc.wheels[k], "motor", None) is None]
    note = (f"wheel {i + 1} has its own motor: motor values go to wheels[{i}].motor" if own else
            f"wheel {i + 1} has no motor of its own: motor values go to the shared motor, which wheel"
            f"{'s' if len(shared) > 1 else ''} {', '.join(map(str, shared))} use{'' if len(shared) > 1 else 's'}")
    return Target(f"wheels[{i}]", f"wheels[{i}].motor" if own else "motor", note)


def unscenarioed_target(wheel: int | None) -> Target:
    """Patch keys with no scenario to look in: `--wheel N` addresses wheels[N-1] and the shared motor."""
    if wheel is None:
        return Target("wheel", "motor", None)
    return Target(f"wheels[{wheel - 1}]", "motor", f"no --scenario: wheel values go to wheels[{wheel - 1}] and motor "
                  "values to the shared motor; move them to that wheel's own motor if it has one")


def retarget(patch: dict, where: Target) -> dict:
    """The fit's patch with its `wheel` and `motor` sections under the target's keys (a key path
    `a.b` becomes nested mappings; `wheels[1]` is one key the scenario editor reads as a list item)."""
    out: dict = {}
    for key, value in patch.items():
        path = {"wheel": where.wheel_key, "motor": where.motor_key}.get(key, key).split(".")
        node = out
        for part in path[:-1]:
            node = node.setdefault(part, {})
        if isinstance(value, dict):
            node.setdefault(path[-1], {}).update(value)
        else:
            node[path[-1]] = value
    return out


def wheel_bench(sc, i: int):
    """(device-like figures for `sim.fit.fit_wheel`, scenario-like view whose `wheel` is wheel i)."""
    from types import SimpleNamespace

    from ..model.device3d import Device3D

    unit = Device3D.from_scenario(sc).wheels[i]
    bench = WheelBench(I_w_kg_m2=unit.spin_inertia_kg_m2, resistance_ohm=unit.resistance_ohm,
                       k_e_v_s_rad=unit.k_e_v_s_rad, wheel_coulomb_n_m=unit.coulomb_n_m,
                       wheel_viscous_n_m_s=unit.viscous_n_m_s)
    return bench, SimpleNamespace(wheel=sc.wheel_list[i], body=sc.body, source=sc.source)


def swing_bench(sc) -> SwingBench:
    """The hinge device's swing figures (InputError naming the mount for a ball or floor mount)."""
    from ..model.device3d import Device3D

    if sc.body.mount != "hinge":
        raise InputError(f"{sc.source}: body.mount {sc.body.mount}: " + (
            BALL_SWING if sc.body.mount == "ball" else
            "a body on the floor does not swing about a fixed pivot; fit free-swing on a hinge rig"))
    device = Device3D.from_scenario(sc)
    com = device.com_m
    d = float(np.hypot(com[1], com[2]))     # the hinge line is body x: only the y-z offset swings
    spin = sum(w.spin_inertia_kg_m2 * w.axis[0] ** 2 for w in device.wheels)
    return SwingBench(mbar_kg_m=device.mass_kg * d, gravity_m_s2=device.gravity_m_s2,
                      J_kg_m2=float(device.inertia_about_pivot_kg_m2(with_spin=False)[0, 0]), I_w_kg_m2=spin,
                      wheel_coulomb_n_m=sum(w.coulomb_n_m for w in device.wheels),
                      wheel_viscous_n_m_s=sum(w.viscous_n_m_s for w in device.wheels))
