"""The check battery: exit codes, verdict contents, push bisection, tolerances and Monte Carlo.

Scenarios here are test fixtures of our own invention (a desk pendulum at a 2 ms step, LQR only),
sized so that each check runs in a few seconds.
"""

import copy
import json
import math

import numpy as np
import pytest
import yaml

from sim.cli import main
from sim.core.errors import ScenarioError
from sim.model.scenario import validate_scenario
from sim.model.scenario_yaml import load_raw
from sim.model.tolerances import perturbed_raw, scenario_tolerances
from sim.studies.verdicts import max_push

FAST = {
    "name": "fast test pendulum",
    "world": {"step": "2 ms"},
    "body": {"parts": [{"name": "arm", "shape": "box", "length": "220 mm", "width": "20 mm", "thickness": "6 mm",
                        "material": "aluminium", "at": "110 mm"}],
             "pivot_friction": {"viscous": "2e-5 N*m*s/rad"}},
    "wheel": {"at": "200 mm", "parts": [
        {"name": "rim", "shape": "ring", "outer_radius": "70 mm", "inner_radius": "55 mm", "thickness": "8 mm",
         "material": "PLA"},
        {"name": "web", "shape": "ring", "outer_radius": "55 mm", "inner_radius": "4 mm", "thickness": "2 mm",
         "material": "PLA"}]},
    "motor": {"speed_constant": "300 rpm/V", "resistance": "1.8 ohm", "current_limit": "4 A",
              "rotor_inertia": "8e-6 kg*m^2", "mass": "55 g"},
    "drive": {"supply": "12 V"},
    "sensors": {"rate": "250 Hz", "angle": {"noise": "0.05 deg"}, "rate_gyro": {"noise": "0.02 rad/s"}},
    "strategy": {"kind": "lqr"},
    "trial": {"duration": "1.5 s", "start": {"angle": "3 deg"}, "seed": 3},
}


def fast_raw(**changes) -> dict:
    """A deep copy of FAST with top-level sections updated."""
    raw = copy.deepcopy(FAST)
    for key, value in changes.items():
        raw[key] = {**raw.get(key, {}), **value} if isinstance(value, dict) else value
    return raw


def write_scenario(path, raw) -> str:
    path.write_text(yaml.safe_dump(raw, sort_keys=False))
    return str(path)


@pytest.mark.slow
def test_check_exit_codes_for_a_passing_and_a_failing_design(tmp_path):
    good = write_scenario(tmp_path / "good.yaml", fast_raw())
    # The same device on a 1.5 V supply: it still balances, but cannot take a 5 mN m s push.
    weak = write_scenario(tmp_path / "weak.yaml", fast_raw(drive={"supply": "1.5 V"}))
    assert main(["check", good, "--out", str(tmp_path / "good"), "--trials", "2", "--workers", "1"]) == 0
    assert main(["check", weak, "--out", str(tmp_path / "weak"), "--trials", "2", "--workers", "1"]) == 1
    for name, passed in (("good", True), ("weak", False)):
        v = json.loads((tmp_path / name / "verdict.json").read_text())
        assert v["passed"] is passed
        assert {"passed", "criteria", "max_push_survived_n_m_s", "wheel_burst_safety_factor", "monte_carlo"} <= set(v)
        assert v["monte_carlo"]["trials"] == 2
        assert all({"name", "value", "limit", "passed"} <= set(c) for c in v["criteria"])
        assert v["passed"] == all(c["passed"] for c in v["criteria"])
        report = (tmp_path / name / "report.md").read_text()
        assert "![pushes](pushes.png)" in report
        # the push figure marks the bisection's tries: survived (green o) and lost (red x) both occur
        from pictures import pixels_near
        from sim.studies.verdict_report import FAIL_COLOUR, PASS_COLOUR
        tries = v["pushes"]["positive"]["evals"] + v["pushes"]["negative"]["evals"]
        for colour, survived in ((PASS_COLOUR, True), (FAIL_COLOUR, False)):
            shown = pixels_near(tmp_path / name / "pushes.png", colour, tol=20 / 255)
            assert (shown > 10) == any(ok == survived for _, ok in tries), (name, colour, shown)
        assert "licensed practice" in report.strip().splitlines()[-1]
    weak_v = json.loads((tmp_path / "weak" / "verdict.json").read_text())
    failed = {c["name"] for c in weak_v["criteria"] if not c["passed"]}
    assert "max_push_survived_n_m_s" in failed
    assert weak_v["max_push_survived_n_m_s"] < 0.005


def test_check_bad_input_exits_2_and_writes_nothing(tmp_path, capsys):
    bad = write_scenario(tmp_path / "bad.yaml", fast_raw(tolerances={"motor.resistanse": "10%"}))
    out = tmp_path / "out"
    assert main(["check", bad, "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "tolerances.motor.resistanse" in err and "bad.yaml" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def _survives_by_trace(impulse: float) -> bool:
    """Survival judged here from a whole trial's trace, not by the check's own survival function:
    upright at rest, one push at 0.5 s, 3 s to recover (the battery's stated set-up); survived when
    the angle never passes the 30 deg release angle and the last 0.5 s stay within 1 deg and
    slower than 0.2 rad/s (README, check: "clearly caught")."""
    from sim.run.trial import run_trial
    raw = fast_raw(trial={"duration": 3.5, "start": {"angle": 0.0}, "pushes": [{"at": 0.5, "impulse": impulse}]})
    tr = run_trial(validate_scenario(raw, where="fast.yaml"), seed=3).trace
    angle = np.abs(np.remainder(tr.view("angle") + np.pi, 2 * np.pi) - np.pi)
    last = slice(tr.n - int(round(0.5 / tr.step_s)), tr.n)
    return bool(angle.max() < math.radians(30) and angle[last].max() < math.radians(1)
                and np.abs(tr.view("rate")[last]).max() < 0.2)


def test_push_bisection_agrees_with_brute_force():
    sc = validate_scenario(fast_raw(), where="fast.yaml")
    found = max_push(sc, sign=1.0, seed=3, start_n_m_s=0.005, rel_tol=0.05)
    # Brute force on a 1 mN m s grid around the expected range (reference for the bisection), each
    # point judged from its own full trial
    grid = np.arange(10, 25) * 1e-3
    ok = [_survives_by_trace(x) for x in grid]
    assert ok[0] and not ok[-1]
    first_lost = ok.index(False)
    assert all(not o for o in ok[first_lost:]), "survival must fall off monotonically for bisection to apply"
    brute = grid[first_lost - 1]
    # Both bracket the same threshold: within one grid step plus the bisection's 5% tolerance.
    np.testing.assert_allclose(found["max_survived_n_m_s"], brute, atol=1e-3 + 0.05 * found["smallest_lost_n_m_s"])
    assert found["smallest_lost_n_m_s"] > found["max_survived_n_m_s"]


def test_tolerance_keys_are_checked_at_load():
    cases = {
        "motor.resistanse": "no such scenario key",
        "wheel.parts[0].mass": "no value",            # the rim gives a material, not a mass
        "sensors.angle.bias": None,                    # fine
        "motor.current_limit": None,
    }
    for key, expect in cases.items():
        raw = fast_raw(tolerances={key: "1 deg" if "bias" in key else "10%"})
        if expect is None:
            validate_scenario(raw, where="t.yaml")
        else:
            with pytest.raises(ScenarioError, match=expect):
                validate_scenario(raw, where="t.yaml")
    with pytest.raises(ScenarioError, match="tolerances.sensors.angle.bias: expected an angle"):
        validate_scenario(fast_raw(tolerances={"sensors.angle.bias": "2 ohm"}), where="t.yaml")
    with pytest.raises(ScenarioError, match="below 100%"):
        validate_scenario(fast_raw(tolerances={"drive.supply": "120%"}), where="t.yaml")


def test_perturbations_stay_in_band_and_revalidate():
    raw = fast_raw(tolerances={"motor.resistance": "10%", "sensors.angle.bias": "1 deg",
                               "wheel.at": "2 mm"})
    sc = validate_scenario(raw, where="t.yaml")
    tols = scenario_tolerances(sc)
    rng = np.random.default_rng(0)
    draws = []
    for _ in range(60):
        pert, drawn = perturbed_raw(raw, tols, rng)
        psc = validate_scenario(pert, where="t.yaml")
        draws.append((psc.motor.resistance, psc.sensors.angle.bias, psc.wheel.at))
        assert drawn["motor.resistance"] == psc.motor.resistance
    r, b, at = np.array(draws).T
    assert r.min() >= 1.8 * 0.9 and r.max() <= 1.8 * 1.1 and r.max() - r.min() > 0.25   # spread over the band
    assert np.abs(b).max() <= math.radians(1.0) and at.min() >= 0.198 and at.max() <= 0.202
    assert raw["motor"]["resistance"] == "1.8 ohm"          # the nominal mapping is untouched


def test_default_tolerances_apply_when_absent():
    sc = validate_scenario(fast_raw(), where="t.yaml")
    keys = {t.key for t in scenario_tolerances(sc)}
    assert {"motor.resistance", "motor.speed_constant", "drive.supply", "sensors.angle.bias"} == keys
    raw, where = load_raw(None)
    assert raw and where.endswith(".yaml")


def test_requirements_parse_units_and_defaults():
    sc = validate_scenario(fast_raw(requirements={"min_push": "8 mN*m*s", "wheel_speed_margin": "30%",
                                                  "settle_time": "500 ms", "pass_fraction": "90%"}), where="t.yaml")
    req = sc.requirements
    np.testing.assert_allclose([req.min_push, req.wheel_speed_margin, req.settle_time, req.pass_fraction],
                               [0.008, 0.30, 0.5, 0.90], rtol=1e-12)
    assert req.burst_safety_factor == 4.0     # suggested minimum for printed parts (references.md [mem])
    with pytest.raises(ScenarioError, match="requirements.min_pusch"):
        validate_scenario(fast_raw(requirements={"min_pusch": "8 mN*m*s"}), where="t.yaml")
