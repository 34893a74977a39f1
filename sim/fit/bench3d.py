"""Bench tests on a 3D device (`Scenario.is_planar` false): what the one-wheel fits need of it.

The fits (`sim.fit.fit_wheel`, `sim.fit.fit_swing`) read a few lumped figures of a one-wheel device
and write their patch under `motor`, `wheel` and `body`. On a 3D device (one to three wheels on any
axes, a hinge or a ball mount; `sim.model.device3d`):

- spin-up and coast-down are tests of one wheel with the body held (`body.locked: true` simulates that
  bench exactly: the clamp takes the reaction): the figures are that wheel's
  (its spin inertia, bearing friction, its motor's resistance), and the patch addresses that wheel,
  `wheels[i]` (i from 0, as in the scenario's list) for its own keys, and its own motor
  `wheels[i].motor` or, when it has none, the shared `motor` (which then changes every wheel that
  shares it: the fit says so). A scenario with the `wheel:` shorthand keeps `wheel` and `motor`.
- free-swing on a hinge is the one-wheel test about the hinge (body frame x): m g d with d the
  centre of mass's distance from the hinge line, and the inertia about the hinge with the wheels'
  spin inertia left out (a free bearing keeps each wheel's spin momentum about its own axis, so
  only its transverse inertia swings with the body; ../shared/references.md, free swing).
- free-swing on a ball mount about a named horizontal axis n (world x or y with the body upright,
  `--axis`; the body hangs after half a turn about it): the upright linear model's mass matrix
  (`sim.model.linear3d`) turned upside down, with the wheels' spin left out and the turn about the
  vertical free (a ball has no stiffness there), leaves for the two horizontal axes {n, m} the
  effective inertia J_hh - J_hv J_vv^-1 J_vh (the heading's momentum eliminated, as for any cyclic
  coordinate; Goldstein, Classical Mechanics, ch. 8, Routh's procedure, from memory). A swing about
  n is one pendulum exactly when n is a principal axis of that 2x2 tensor; otherwise it wanders
  into m, and the fit is refused (`BALL_COUPLED`). m g d is the full centre-of-mass distance.
  The patch takes the pivot friction, and `body.inertia_correction` (which acts about body x) only
  when n is body x.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..core.errors import InputError

BALL_AXIS = ("a free swing on a ball mount needs --axis x or y: the world axis, with the body upright, that it "
             "swings about hanging")
BALL_COUPLED = 0.02
"""Largest |J_nm| / min(J_nn, J_mm) of the effective horizontal inertia for a swing about n to count as
one pendulum (our choice: a 2% product of inertia shifts the mode's axis by about 1 degree or less)."""


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


def swing_bench(sc, axis: str | None = None) -> SwingBench:
    """The swing figures: a hinge's about its hinge, a ball's about world `axis` ("x" or "y", upright);
    InputError (one line) for a floor mount, a ball without an axis or with one the swing would leave."""
    from ..model.device3d import Device3D

    if sc.body.mount == "floor":
        raise InputError(f"{sc.source}: body.mount floor: a body on the floor does not swing about a fixed pivot; "
                         "fit free-swing on a hinge or ball rig")
    if (axis is not None) != (sc.body.mount == "ball"):
        raise InputError(f"--axis: {sc.source}: " + (BALL_AXIS if axis is None else
                         "a hinge swings about its hinge; leave --axis out"))
    device = Device3D.from_scenario(sc)
    spin = sum(w.spin_inertia_kg_m2 * w.axis[0] ** 2 for w in device.wheels)
    friction = dict(wheel_coulomb_n_m=sum(w.coulomb_n_m for w in device.wheels),
                    wheel_viscous_n_m_s=sum(w.viscous_n_m_s for w in device.wheels))
    com = device.com_m
    J = device.inertia_about_pivot_kg_m2(with_spin=False)
    if sc.body.mount == "hinge":
        d = float(np.hypot(com[1], com[2]))     # the hinge line is body x: only the y-z offset swings
        return SwingBench(mbar_kg_m=device.mass_kg * d, gravity_m_s2=device.gravity_m_s2, J_kg_m2=float(J[0, 0]),
                          I_w_kg_m2=spin, **friction)
    j_eff, n = ball_swing_inertia(device, axis)
    spin = sum(w.spin_inertia_kg_m2 * float(np.dot(w.axis, n)) ** 2 for w in device.wheels)
    return SwingBench(mbar_kg_m=device.mass_kg * float(np.linalg.norm(com)), gravity_m_s2=device.gravity_m_s2,
                      J_kg_m2=j_eff, I_w_kg_m2=spin, **friction)


def ball_swing_inertia(device, axis: str) -> tuple[float, np.ndarray]:
    """(J_eff about n, n in the body frame) for a ball device swinging about world `axis` (module
    docstring); InputError when the swing about n is not one pendulum."""
    R0 = np.array(device.upright())
    n = R0.T @ np.eye(3)[{"x": 0, "y": 1}[axis]]          # the body axis that is world x (y) upright
    v = np.asarray(device.com_m) / float(np.linalg.norm(device.com_m))
    m = np.cross(v, n)
    basis = np.column_stack([n, m, v])
    J = basis.T @ device.inertia_about_pivot_kg_m2(with_spin=False) @ basis
    eff = J[:2, :2] - np.outer(J[:2, 2], J[2, :2]) / J[2, 2]
    coupling = abs(eff[0, 1]) / min(eff[0, 0], eff[1, 1])
    if coupling > BALL_COUPLED:
        raise InputError(f"--axis {axis}: hanging from its ball, this body does not swing about world {axis} alone: "
                         f"its effective inertia couples it with the horizontal axis across it ({100 * coupling:.1f}% "
                         f"of the smaller inertia, more than {100 * BALL_COUPLED:g}%), so the swing wanders and one "
                         "angle cannot be fitted; swing it about a principal axis, or on a hinge rig")
    return float(eff[0, 0]), n


def body_x_swing(device, axis: str) -> bool:
    """True when a ball device's swing axis (world `axis` upright) is body x, about which
    `body.inertia_correction` acts."""
    n = np.array(device.upright()).T @ np.eye(3)[{"x": 0, "y": 1}[axis]]
    return bool(abs(n[0]) > 1.0 - 1e-9)
