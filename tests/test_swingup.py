"""Swing-up on weak motors (sim/strategies/swingup.py under sim/strategies/supervisor.py).

The default `swing_and_catch` is held against a plain reference pumping law written here, over
motor strengths from a tenth of mbar g to twice it; the swing's energy growth, the wheel's speed
range, the start push and the reported swing energy are pinned on their own.

Devices are our own invention: aluminium arms of three lengths with a motor at the tip, carrying
the desk demo's printed wheel (values copied here from memory of the demo file: a PLA ring rim
70/55 mm by 8 mm, a 60% infill web, six 1.1 g bolts at 62 mm, I_w about 2.9e-4 kg m^2) on a
300 rpm/V motor at 12 V, as in the demos. The motor's strength is set through its current limit
(a 0.25 ohm winding, so the limit, not the supply, sets the stall torque at every strength tried).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from sim.core.angles import wrap_angles
from sim.model.device import Device
from sim.model.scenario import validate_scenario
from sim.run.metrics import trial_metrics
from sim.run.trial import run_trial
from sim.strategies import Reading, Strategy, StrategyParams, StrategySpec

WHEEL_PARTS = [
    {"name": "rim", "shape": "ring", "outer_radius": "70 mm", "inner_radius": "55 mm", "thickness": "8 mm",
     "material": "PLA"},
    {"name": "web", "shape": "ring", "outer_radius": "55 mm", "inner_radius": "4 mm", "thickness": "2 mm",
     "material": "PLA", "infill": "60%"},
    {"name": "rim bolts", "shape": "point", "mass": "1.1 g", "at": "62 mm", "count": 6},
]
DEMO_SENSORS = {"rate": "500 Hz", "delay": "2 ms",
                "angle": {"counts_per_rev": 4096, "noise": "0.05 deg"},
                "rate_gyro": {"noise": "0.02 rad/s", "bias": "0.005 rad/s"},
                "wheel": {"counts_per_rev": 2048}}
ARMS = {"short": (150, 20), "desk": (220, 40), "long": (300, 80)}   # arm length mm, motor mass g
STRENGTHS = (0.1, 0.15, 0.2, 0.3, 0.5, 0.75, 1.0, 1.5, 2.0)        # stall torque / (mbar g)


def weak_raw(arm: str, stall_over_mgl: float, strategy, *, duration_s: float = 15.0, sensors=True,
             friction=True) -> dict:
    """A raw scenario of the test device hanging at rest, its stall torque `stall_over_mgl` mbar g."""
    length_mm, motor_g = ARMS[arm]
    raw = {
        "name": f"weak {arm} arm",
        "world": {"gravity": 9.81, "step": 0.001},
        "body": {"parts": [
            {"name": "arm", "shape": "box", "length": f"{length_mm} mm", "width": "15 mm", "thickness": "5 mm",
             "material": "aluminium", "at": f"{length_mm / 2} mm"},
            {"name": "motor", "shape": "point", "mass": f"{motor_g} g", "at": f"{length_mm - 10} mm"}]},
        "wheel": {"at": f"{length_mm - 10} mm", "parts": WHEEL_PARTS},
        "motor": {"speed_constant": "300 rpm/V", "resistance": "0.25 ohm", "current_limit": "1 A",
                  "rotor_inertia": "8e-6 kg*m^2", "mass": "0 g"},
        "drive": {"supply": "12 V"},
        "strategy": strategy,
        "trial": {"duration": f"{duration_s} s", "start": {"angle": "180 deg"}, "seed": 1},
    }
    if friction:
        raw["body"]["pivot_friction"] = {"coulomb": "0.4 mN*m", "viscous": "2e-5 N*m*s/rad"}
        raw["wheel"]["bearing_friction"] = {"coulomb": "0.8 mN*m", "viscous": "1e-6 N*m*s/rad"}
    if sensors:
        raw["sensors"] = DEMO_SENSORS
    probe = Device.from_scenario(validate_scenario(raw, where="<probe>"))
    amps = stall_over_mgl * probe.gravity_torque_coeff_n_m / probe.k_t_n_m_a
    raw["motor"]["current_limit"] = f"{amps} A"
    return raw


def weak_scenario(arm: str, stall_over_mgl: float, strategy, **kw):
    sc = validate_scenario(weak_raw(arm, stall_over_mgl, strategy, **kw), where="<weak test device>")
    d = Device.from_scenario(sc)
    # the strength really is what the sweep says (the current limit sets it, not the supply)
    assert_allclose(d.stall_torque_n_m / d.gravity_torque_coeff_n_m, stall_over_mgl, rtol=1e-9)
    return sc


class SignPump(Strategy):
    """Reference pumping law, written here on purpose without the library's helpers: full supply
    voltage against the body's measured rate (so the wheel torque, and with it the body's energy
    gain -tau theta_d, keeps its sign through each half swing), winding open once the body's
    energy E = 1/2 J theta_d^2 + mbar g (cos theta - 1) reaches upright at rest (E >= 0).
    Resonant pumping by reversing the motor with the swing: common practice, no source."""

    goal = None
    swings_up = True

    class Params(StrategyParams):
        pass

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self.phase = "swing up"
        self.J = self.device.J_kg_m2
        self.mgl = self.device.mbar_kg_m * self.device.gravity_m_s2

    def decide(self, reading: Reading) -> float:
        e = 0.5 * self.J * reading.rate_rad_s ** 2 + self.mgl * (math.cos(reading.angle_rad) - 1.0)
        self.open_circuit = e >= 0.0
        if self.open_circuit:
            return 0.0
        return -self.supply_v if reading.rate_rad_s > 0 else self.supply_v


REFERENCE = {"kind": "swing_and_catch", "swing_up": StrategySpec(kind="SignPump (test)", cls=SignPump,
                                                                 params=SignPump.Params())}
DEFAULT = {"kind": "swing_and_catch"}   # energy swing-up, lqr balance, 20/30 deg: the defaults under test


def caught_at(sc) -> tuple[float | None, float]:
    """(caught_at_s or None, the wheel's peak speed before the catch as a fraction of no-load)."""
    res = run_trial(sc, isolate=False)
    m = trial_metrics(res)
    caught = m["caught_at_s"] if m["outcome"] == "balanced" else None
    k = res.trace.n if caught is None else int(round(caught / sc.world.step))
    return caught, float(np.max(np.abs(res.trace.view("wheel_speed")[:k])) / res.device.no_load_speed_rad_s)


@pytest.mark.slow
def test_default_swing_and_catch_catches_whatever_reference_pumping_catches():
    # Issue 12's bar: the default swing_and_catch catches every device that resonant pumping (the
    # reference law above, then the same default LQR near the top) catches, in no more than about
    # 1.5 times its time. Limit 1.5: the issue's, not a published figure. Over this grid we measured
    # ratios 0.87-1.32 with the reference catching at every point.
    # The wheel's range: where pumping takes several swings (stall up to 0.5 mbar g) the default's
    # wheel, before the catch, stays below a quarter of its no-load speed or no faster than the
    # reference's plus 5% of it (our bounds; we measured it up to 0.13 of no-load below the
    # reference's, above it only where both stayed under 0.15).
    rows, worse, faster_wheel = [], [], []
    for arm in ARMS:
        for k in STRENGTHS:
            t_ref, w_ref = caught_at(weak_scenario(arm, k, REFERENCE))
            t_ours, w_ours = caught_at(weak_scenario(arm, k, DEFAULT))
            rows.append((arm, k, t_ref, t_ours))
            if t_ref is not None and (t_ours is None or t_ours > 1.5 * t_ref):
                worse.append((arm, k, t_ref, t_ours))
            if k <= 0.5 and w_ours > max(0.25, w_ref + 0.05):
                faster_wheel.append((arm, k, w_ref, w_ours))
    assert not worse, f"(arm, stall/mbar g, reference caught at s, default caught at s): {worse}"
    assert not faster_wheel, f"(arm, stall/mbar g, wheel peak / no-load: reference, default): {faster_wheel}"
    # not a vacuous comparison: the reference does catch across the grid, the weakest motors included
    caught_by_ref = [r for r in rows if r[2] is not None]
    assert len(caught_by_ref) >= 0.8 * len(rows)
    assert any(r[1] == 0.1 and r[3] is not None for r in rows)


@pytest.mark.parametrize("swing_up", ["energy", "pump"])
def test_weak_motor_from_the_issue_swings_up_and_the_wheel_never_parks(swing_up):
    # The issue's device class: stall torque about 0.14 mbar g, a 12 s trial, from hanging at rest.
    # Before this change the latched kick ran the wheel to 300 of 302 rad/s and the body never left
    # the bottom. Bound 50% of the no-load speed: ours (the wheel keeps half its range); we measured
    # peaks near 15% with the energy law.
    sc = weak_scenario("desk", 0.14, {"kind": "swing_and_catch", "swing_up": {"kind": swing_up}}, duration_s=12.0)
    res = run_trial(sc)
    m = trial_metrics(res)
    assert m["outcome"] == "balanced", m
    caught = m["caught_at_s"]
    k_caught = int(round(caught / sc.world.step))
    before = np.abs(res.trace.view("wheel_speed")[:k_caught])
    assert np.max(before) < 0.5 * res.device.no_load_speed_rad_s


def _half_swing_amplitudes(res) -> np.ndarray:
    """Largest |angle from hanging| of each half swing, rad, from the true rate's sign changes."""
    angle = wrap_angles(np.array(res.trace.view("angle")))  # (-pi, pi], 0 upright
    from_hanging = np.pi - np.abs(angle)                   # 0 hanging, pi upright
    rate = np.asarray(res.trace.view("rate"))
    turns = np.flatnonzero(np.sign(rate[1:]) * np.sign(rate[:-1]) < 0) + 1
    return from_hanging[turns]


def test_energy_law_torque_follows_the_swing_and_each_half_swing_is_larger():
    # Resonant pumping (common practice, no source): torque reversed with the body's rate makes
    # every half swing larger than the one before, however weak the motor. No latched kick: the
    # torque keeps one sign for less than one natural period 2 pi sqrt(J / mbar g) (small swings;
    # larger swings are slower, so the bound is checked on the first 3 s, below 90 deg).
    sc = weak_scenario("desk", 0.1, {"kind": "energy"}, duration_s=3.0, sensors=False, friction=False)
    res = run_trial(sc)
    assert res.outcome == "completed"
    amps = _half_swing_amplitudes(res)
    assert len(amps) >= 5
    below = amps[amps < math.radians(90)]
    assert np.all(np.diff(below) > 0), np.degrees(below)
    assert amps[-1] > math.radians(60)                     # and it gets somewhere in 3 s
    torque = np.asarray(res.trace.view("torque"))
    signs = np.sign(torque[np.abs(torque) > 1e-9])
    runs = np.diff(np.flatnonzero(np.diff(np.concatenate(([0], signs, [0]))) != 0))
    period = 2 * math.pi * math.sqrt(res.device.J_kg_m2 / res.device.gravity_torque_coeff_n_m)
    assert np.max(runs) * sc.world.step < period


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(kind=st.sampled_from(["energy", "pump"]), arm=st.sampled_from(sorted(ARMS)),
       stall_over_mgl=st.floats(0.1, 2.0), kick=st.sampled_from([-1, 1]), target_j=st.floats(-0.05, 0.0))
def test_energy_never_falls_while_pumping_below_the_target(kind, arm, stall_over_mgl, kick, target_j):
    # Astrom & Furuta, Automatica 36(2), 2000 (references.md "Swing-up"): dE/dt = -tau theta_d, and the
    # law's torque (pumping, or the bleed only where it pumps too) keeps -tau theta_d >= 0 while
    # E < E_ref; so does `pump`'s voltage against the swing, whose winding floats where back-EMF
    # would make it a brake. Frictionless device, ideal sensors, default gains; energy from the true state
    # at each control tick. Tolerance 1e-4 of the well depth per tick: the zero-order hold lets
    # a torque run on for up to one tick (2 ms) past a reversal of the rate.
    law = {"kind": kind, "kick_direction": kick, "energy_target": target_j}
    sc = weak_scenario(arm, stall_over_mgl, law, duration_s=4.0, sensors=False, friction=False)
    res = run_trial(sc)
    dev, tr = res.device, res.trace
    e = np.array([dev.body_energy_j(a, w) for a, w in zip(tr.view("angle"), tr.view("rate"))])
    per_tick = e[:: sc.control_steps]
    # pumping: until the energy first comes within 1% of the well of the target; from there the
    # law regulates around it (a strong motor at the bottom of the swing moves E by about 1% of
    # the well per tick, and the law sees the state through its sensors at the tick, so a sampled
    # law overshoots the target by a tick either way)
    well = 2.0 * dev.gravity_torque_coeff_n_m
    reached = np.flatnonzero(per_tick >= target_j - 0.01 * well)
    pumping = per_tick[: reached[0] + 1 if len(reached) else len(per_tick)]
    assert len(pumping) > 10
    assert np.min(np.diff(pumping)) >= -1e-4 * well
    assert per_tick.max() > per_tick[0] + 0.5 * well        # and it did pump (over half the well in 4 s)


def test_swing_energy_report_matches_the_trace_and_says_when_it_fell_short():
    # Energy needed from hanging at rest to upright at rest: 2 mbar g (common practice, no source).
    # A motor of 0.05 mbar g cannot finish in 1.5 s: the report says the swing fell short, with the
    # peak recomputed here from the measured columns the law saw.
    sc = weak_scenario("desk", 0.05, {"kind": "energy"}, duration_s=1.5, sensors=False)
    res = run_trial(sc)
    dev, tr, extra = res.device, res.trace, res.strategy.extra_metrics
    assert_allclose(extra["swing_energy_needed_j"], 2.0 * dev.mbar_kg_m * dev.gravity_m_s2, rtol=1e-12)
    measured = [dev.body_energy_j(a, w) for a, w in zip(tr.view("meas_angle"), tr.view("meas_rate"))]
    assert_allclose(extra["swing_energy_peak_j"], max(measured) + extra["swing_energy_needed_j"], rtol=1e-9)
    assert_allclose(extra["swing_energy_peak_fraction"], extra["swing_energy_peak_j"] / extra["swing_energy_needed_j"],
                    rtol=1e-12)
    assert 0.0 < extra["swing_energy_peak_fraction"] < 1.0


def test_a_caught_swing_up_reports_enough_energy_and_its_handover():
    sc = weak_scenario("desk", 0.3, DEFAULT, duration_s=6.0)
    res = run_trial(sc)
    m = trial_metrics(res)
    extra = res.strategy.extra_metrics
    assert m["outcome"] == "balanced"
    assert extra["handover_count"] >= 1
    # caught near the top: the swing had (about) what upright needs; 5% allows for the 20 deg catch
    # angle and sensor noise (our bound)
    assert extra["swing_energy_peak_fraction"] > 0.95


def test_pump_floats_the_winding_where_back_emf_would_brake():
    # DC motor line (any motor text; common practice, no source): i = (V - k_e w) / R, so with the
    # back-EMF k_e w above the applied V of the same sign the current, and the torque, reverse: the
    # pumping voltage would brake the wheel and its reaction would take energy from the body.
    sc = weak_scenario("desk", 0.5, {"kind": "pump"}, sensors=False)
    dev = Device.from_scenario(sc)
    law = sc.strategy.build(dev, rng=np.random.default_rng(0))
    r = Reading()
    r.t_s, r.angle_rad, r.rate_rad_s = 0.0, math.radians(150), -4.0   # swinging fast: pump, torque +
    level_speed = law.level / dev.k_e_v_s_rad
    r.wheel_speed_rad_s = 0.9 * level_speed
    assert law.decide(r) == law.level and not law.open_circuit
    r.wheel_speed_rad_s = 1.1 * level_speed
    assert law.decide(r) == 0.0 and law.open_circuit
    r.wheel_speed_rad_s = -1.1 * level_speed                            # spinning the other way: drives
    assert law.decide(r) == law.level and not law.open_circuit
