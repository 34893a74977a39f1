"""`catch-map` on a jump device: pre-brake wheel speed (a factor of the needed speed) against the brake's
engagement time, one jump attempt per cell, on the bundled floor cube (scenarios/floor_jump.yaml, our
own invention). The needed speed itself is checked against Gajamohan, Merz, Thommen & D'Andrea (IROS
2012) in tests/test_jump_figures.py; here the map's shape is checked against the physics of the brake."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from sim.cli import main

DEMO = str(Path(__file__).resolve().parents[1] / "scenarios" / "floor_jump.yaml")
# 3x3: speed factors 0.7, 1.1, 1.5; brake engagement 0, 50, 100 ms. 2.5 s trials: the brake comes at
# about 1.3 s at the highest factor, leaving the 1 s hold a cell needs to be judged got up.
ARGS = ["--grid", "3", "--speed-factor-min", "0.7", "--speed-factor-max", "1.5", "--brake-time-min", "0 ms",
        "--brake-time-max", "100 ms", "--set", "trial.duration=2.5s", "--workers", "1"]


def _mapped(out: Path, scenario: str, args: list) -> tuple:
    """Run catch-map into `out`; (out, the CSV's rows keyed by (speed factor, brake time in ms))."""
    assert main(["catch-map", scenario, *args, "--out", str(out)]) == 0
    with open(out / "catch_map.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    return out, {(round(float(r["speed_factor"]), 6), round(float(r["brake_engage_time_s"]) * 1e3)): r for r in rows}


@pytest.fixture(scope="module")
def jump_map(tmp_path_factory):
    return _mapped(tmp_path_factory.mktemp("jump") / "map", DEMO, ARGS)


def test_the_map_has_one_attempt_per_cell_and_its_files(jump_map):
    out, cells = jump_map
    assert sorted(cells) == [(f, t) for f in (0.7, 1.1, 1.5) for t in (0, 50, 100)]
    assert all(r["jump_attempts"] == "1" for r in cells.values())
    summary = json.loads((out / "catch_map.json").read_text())
    assert summary["kind"] == "jump" and summary["cells"] == 9
    assert summary["got_up_cells"] == sum(r["got_up"] == "True" for r in cells.values())
    assert "[ms]" in summary["axes"][1]["label"] and summary["undecided_cells"] == 0
    assert (out / "catch_map.png").stat().st_size > 10_000


def test_well_below_the_need_nothing_gets_up_and_the_rise_is_bounded_by_the_momentum_handed_over(jump_map):
    _, cells = jump_map
    for t in (0, 50, 100):
        r = cells[(0.7, t)]
        assert r["got_up"] == "False"
        # Lossless bound: the brake hands the wheel's momentum to the body (conservation of angular
        # momentum through an inelastic lock), so the body's kinetic energy, hence the rise of its
        # centre of mass, scales with the square of the wheel speed: at 0.7 of the need the rise is at
        # most 0.7^2 = 0.49 of the rise to balance (Gajamohan, Merz, Thommen & D'Andrea, IROS 2012,
        # momentum then energy [from memory]); tolerance 0.02 for the cube's rest tilt noise.
        assert float(r["rise_fraction"]) <= 0.7 ** 2 + 0.02
    # A slipping friction brake turns relative-motion energy into heat the longer it takes to lock
    # (energy dissipated in clutch engagement: Shigley's Mechanical Engineering Design, clutches and
    # brakes [from memory]): the rise falls as the engagement time grows.
    rises = [float(cells[(0.7, t)]["rise_fraction"]) for t in (0, 50, 100)]
    assert rises[0] > rises[1] > rises[2] > 0.0


def test_ten_percent_over_with_a_fast_brake_gets_up_and_a_slower_brake_needs_more_speed(jump_map):
    _, cells = jump_map
    assert cells[(1.1, 0)]["got_up"] == "True" and cells[(1.1, 0)]["outcome"] == "balanced"
    # the smallest factor that gets up, per engagement time: never falls as the brake gets slower
    # (the slip loss above only grows); None (nothing on the grid) counts as beyond the grid
    least = []
    for t in (0, 50, 100):
        ups = [f for f in (0.7, 1.1, 1.5) if cells[(f, t)]["got_up"] == "True"]
        least.append(min(ups) if ups else math.inf)
    assert least == sorted(least) and least[0] < least[-1]


def test_far_over_the_need_the_cube_goes_over_its_edge(jump_map):
    _, cells = jump_map
    # 1.5x the lossless need hands the body 1.5^2 = 2.25 times the energy the rise needs (same
    # relation as above) and an instant brake loses little of it: the body passes balance and tips on
    r = cells[(1.5, 0)]
    assert r["got_up"] == "False" and float(r["farthest_past_balance_rad"]) > math.radians(30)


@pytest.mark.parametrize("extra,key", [
    (["--speed-factor-min", "0.2"], "--speed-factor-min"),
    (["--speed-factor-min", "1.4", "--speed-factor-max", "1.2"], "--speed-factor-min"),
    (["--brake-time-max", "5 kg"], "--brake-time-max"),
    (["--brake-time-max", "20 s"], "--brake-time-max"),
    (["--angle-max", "10 deg"], "--angle-max"),
])
def test_bad_options_are_one_line_and_exit_2(tmp_path, capsys, extra, key):
    out = tmp_path / "map"
    assert main(["catch-map", DEMO, "--grid", "3", "--out", str(out), *extra]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and err.count(key) >= 1 and "Traceback" not in err
    assert not out.exists()


def test_the_jump_options_on_a_device_without_a_jump_are_refused(tmp_path, capsys):
    from test_verdicts import fast_raw, write_scenario
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    assert main(["catch-map", scen, "--brake-time-max", "50 ms", "--out", str(tmp_path / "m")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "--brake-time-max" in err and not (tmp_path / "m").exists()
    assert main(["catch-map", scen, "--jump", "--out", str(tmp_path / "m")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "--jump" in err and not (tmp_path / "m").exists()


PENDULUM = Path(__file__).resolve().parents[1] / "scenarios" / "jump_pendulum.yaml"


def test_a_one_wheel_jump_pendulum_gets_its_jump_map_with_jump(tmp_path):
    # scenarios/jump_pendulum.yaml: swing_and_catch whose swing-up is a brake-to-jump. Without --jump its map
    # stays today's (start angle against rate); with --jump it is the jump map, one jump per cell.
    from sim.model.scenario_yaml import load_scenario
    from sim.studies.jumpmap import is_jump_map
    sc = load_scenario(PENDULUM)
    assert not is_jump_map(sc) and is_jump_map(sc, jump=True)
    out = tmp_path / "map"
    assert main(["catch-map", str(PENDULUM), "--jump", "--grid", "2", "--speed-factor-min", "0.95",
                 "--speed-factor-max", "1.05", "--brake-time-min", "0 ms", "--brake-time-max", "50 ms",
                 "--workers", "1", "--out", str(out)]) == 0
    with open(out / "catch_map.csv", newline="") as fh:
        cells = {(float(r["speed_factor"]), round(float(r["brake_engage_time_s"]) * 1e3)): r for r in csv.DictReader(fh)}
    assert sorted(cells) == [(0.95, 0), (0.95, 50), (1.05, 0), (1.05, 50)]
    assert all(r["jump_attempts"] == "1" for r in cells.values())
    for t in (0, 50):
        short, up = cells[(0.95, t)], cells[(1.05, t)]
        # below the lossless need it falls short: the body's kinetic energy after the brake goes with the
        # square of the wheel speed (momentum, then energy: Gajamohan, Merz, Thommen & D'Andrea, IROS 2012),
        # so the rise reaches at most 0.95^2 of what upright needs (losses take a little more)
        assert short["got_up"] == "False" and 0.8 < float(short["rise_fraction"]) <= 0.95 ** 2
        assert up["got_up"] == "True" and float(up["farthest_past_balance_rad"]) < math.radians(10)
        need = float(up["needed_wheel_speed_rad_s"])
        assert float(up["reached_wheel_speed_rad_s"]) == pytest.approx(1.05 * need, rel=0.02)
    summary = json.loads((out / "catch_map.json").read_text())
    assert summary["kind"] == "jump" and summary["mount"] == "hinge" and summary["got_up_cells"] == 2
    assert (out / "catch_map.png").exists()


def test_a_cell_whose_contact_slid_is_marked_so_and_a_big_grid_gets_initials():
    # a floor jump that rose fully but then slid past floor.slip_limit was marked "short: fell back",
    # and at 21 cells a row the whole words ran into each other
    from sim.studies.jumpmap import _mark, jump_figure
    base = {"got_up": False, "rise_fraction": 1.0, "farthest_past_balance_rad": 0.05}
    assert _mark(base | {"outcome": "slipped"}) == "slid"
    assert _mark(base | {"outcome": "not_caught", "rise_fraction": 0.6, "farthest_past_balance_rad": 0.0}) == "short"
    for n, words in ((5, {"up", "slid"}), (12, {"U", "SL"})):
        rows = [base | ({"got_up": True, "outcome": "balanced"} if (i + j) % 2 else {"outcome": "slipped"})
                for i in range(n) for j in range(n)]
        fig = jump_figure({"name": "grid", "x": list(np.linspace(0.7, 1.5, n)), "y": list(np.linspace(0.0, 0.1, n)),
                           "rows": rows})
        shown = {t.get_text() for t in fig.axes[0].texts}
        assert shown == words, (n, shown)
        import matplotlib.pyplot as plt
        plt.close(fig)


# -- the edge-to-corner jump (scenarios/floor_corner_jump.yaml, our own invention) ------------------------
CORNER = str(Path(__file__).resolve().parents[1] / "scenarios" / "floor_corner_jump.yaml")
# 3x3: corner speed factors 0.7, 0.9, 1.1; brake engagement 0, 50, 100 ms. 3.2 s trials: from the edge the
# corner brake comes at about 1.9 s at 1.1, leaving the 1 s hold a cell needs to be judged got up.
CORNER_ARGS = ["--grid", "3", "--speed-factor-min", "0.7", "--speed-factor-max", "1.1", "--brake-time-min", "0 ms",
               "--brake-time-max", "100 ms", "--set", "trial.duration=3.2s", "--workers", "1"]


@pytest.fixture(scope="module")
def corner_map(tmp_path_factory):
    return _mapped(tmp_path_factory.mktemp("corner") / "map", CORNER, CORNER_ARGS)


def _corner_device():
    from sim.model.device3d import Device3D
    from sim.model.scenario_yaml import load_scenario
    return Device3D.from_scenario(load_scenario(CORNER))


def test_the_corner_map_is_one_corner_jump_per_cell_from_the_edge_and_writes_its_files(corner_map):
    from sim.strategies.jump_figures import edge_to_corner
    out, cells = corner_map
    assert sorted(cells) == [(f, t) for f in (0.7, 0.9, 1.1) for t in (0, 50, 100)]
    assert all(r["jump_attempts"] == "1" for r in cells.values())
    summary = json.loads((out / "catch_map.json").read_text())
    assert summary["kind"] == "jump" and summary["mount"] == "floor" and summary["cells"] == 9
    assert summary["undecided_cells"] == 0
    assert summary["got_up_cells"] == sum(r["got_up"] == "True" for r in cells.values())
    assert (out / "catch_map.png").stat().st_size > 10_000
    fig = edge_to_corner(_corner_device())
    for (f, _), r in cells.items():
        # the need is the edge-to-corner one (the scenario's comment: 248 rad/s), not the face-to-edge
        # one (328 rad/s); the corner wheels are braked at the cell's factor of it (the law's target)
        assert float(r["needed_wheel_speed_rad_s"]) == pytest.approx(fig.needed_wheel_speed_rad_s, rel=1e-9)
        assert float(r["reached_wheel_speed_rad_s"]) == pytest.approx(f * fig.needed_wheel_speed_rad_s, rel=0.02)


def test_the_corner_cells_start_on_the_edge_and_their_rise_is_the_centre_of_mass_rise(corner_map):
    from sim.strategies.jump_figures import edge_to_corner
    _, cells = corner_map
    # Geometry (common practice, no source): turning about the corner, the centre of mass at |c| from it
    # stands |c| cos(theta) above it, theta the tilt from the corner balance; resting on the edge
    # (centre of mass above the edge, at d from it) theta_0 = atan(|c_x| / d), the rise angle of
    # edge_to_corner. The rise fraction is then (h - d) / (|c| - d): the energy reached over the need.
    c = np.asarray(_corner_device().com_m)
    d, norm_c = math.hypot(c[1], c[2]), float(np.linalg.norm(c))
    theta0 = edge_to_corner(_corner_device()).rise_angle_rad
    assert theta0 == pytest.approx(math.atan2(abs(c[0]), d), rel=1e-12)
    for r in cells.values():
        h = norm_c * math.cos(float(r["smallest_tilt_rad"]))
        # tolerance 1e-6: the start is set exactly on the edge; only the CSV's rounding is left
        assert float(r["rise_fraction"]) == pytest.approx((h - d) / (norm_c - d), abs=1e-6)
        assert float(r["smallest_tilt_rad"]) < theta0


def test_the_corner_jump_falls_short_below_the_need_and_gets_up_just_over_it_with_a_fast_brake(corner_map):
    from sim.studies.jumpmap import _mark
    _, cells = corner_map
    for f in (0.7, 0.9):
        for t in (0, 50, 100):
            r = cells[(f, t)]
            assert r["got_up"] == "False" and float(r["rise_fraction"]) < 0.9, (f, t)
            row = {"got_up": False, "outcome": r["outcome"],
                   "farthest_past_balance_rad": float(r["farthest_past_balance_rad"])}
            assert _mark(row) == "short", (f, t, r["outcome"])
        # A slipping friction brake turns relative-motion energy into heat the longer it takes to lock
        # (energy dissipated in clutch engagement: Shigley's Mechanical Engineering Design, clutches and
        # brakes [from memory]): the rise falls as the engagement time grows.
        rises = [float(cells[(f, t)]["rise_fraction"]) for t in (0, 50, 100)]
        assert rises[0] > rises[1] > rises[2] > 0.0, (f, rises)
    # 10% over the lossless need (the law's own default margin) with a fast brake: up, and held
    r = cells[(1.1, 0)]
    assert r["got_up"] == "True" and r["outcome"] == "balanced" and float(r["smallest_tilt_rad"]) < math.radians(2)
    # more energy in the wheels rises higher (momentum, then energy: Gajamohan, Merz, Thommen & D'Andrea,
    # IROS 2012): at each engagement time the rise grows with the factor
    for t in (0, 50, 100):
        rises = [min(float(cells[(f, t)]["rise_fraction"]), 1.0) for f in (0.7, 0.9, 1.1)]
        assert rises[0] < rises[1] <= rises[2], (t, rises)


def test_far_over_the_corner_need_the_cube_goes_over_its_corner():
    # 1.5x the lossless need hands the body about 1.5^2 = 2.25 times the energy the rise needs (same relation
    # as above): with a fast brake it passes the corner balance and falls on the far side
    import yaml

    from sim.studies.jumpmap import _mark, jump_cell
    raw = yaml.safe_load(Path(CORNER).read_text())
    raw["trial"]["duration"] = 3.5
    r = jump_cell({"raw": raw, "where": CORNER, "x": 1.5, "y": 0.05, "seed": 2})
    assert r["got_up"] is False and r["jump_attempts"] == 1
    assert r["farthest_past_balance_rad"] > math.radians(30) and _mark(r) == "over"


def test_a_corner_cell_replaces_the_scenario_start_with_the_edge():
    from sim.studies.jumpmap import cell_raw
    raw = {"body": {"mount": "floor", "balance_on": "corner"}, "strategy": {"kind": "jump", "margin": 1.1},
           "trial": {"duration": 7, "start": {"resting_on": "face", "side": -1}}}
    out = cell_raw(raw, speed_factor=0.8, brake_time_s=0.02)
    assert out["trial"] == {"duration": 7, "start": {"resting_on": "edge"}}
    assert out["strategy"] == {"kind": "jump", "margin": 0.8, "max_attempts": 1}
    assert raw["trial"]["start"] == {"resting_on": "face", "side": -1}      # the caller's mapping is untouched
    # an edge device's start is its own
    edge = cell_raw({**raw, "body": {"mount": "floor"}}, speed_factor=0.8, brake_time_s=0.02)
    assert edge["trial"]["start"] == {"resting_on": "face", "side": -1}


def test_past_the_corner_is_the_tilt_vector_along_its_start_direction():
    # vector projection onto a unit vector (common practice, no source): start (0.3, 0.4), |.| = 0.5
    from sim.studies.jumpmap import corner_past
    got = corner_past(np.array([0.3, 0.0, -0.06, 0.4]), np.array([0.4, 0.0, -0.08, -0.3]))
    assert_allclose(got, [0.5, 0.0, -0.1, 0.0], atol=1e-15)
    assert_allclose(corner_past(np.zeros(3), np.zeros(3)), np.zeros(3))


@pytest.mark.parametrize("extra,key", [
    (["--speed-factor-max", "4"], "--speed-factor-max"),
    (["--brake-time-min", "-1 ms"], "--brake-time-min"),
    (["--rate-max", "1 rad/s"], "--rate-max"),
])
def test_bad_options_on_the_corner_map_are_one_line_and_exit_2(tmp_path, capsys, extra, key):
    out = tmp_path / "map"
    assert main(["catch-map", CORNER, "--grid", "3", "--out", str(out), *extra]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and key in err and "Traceback" not in err
    assert not out.exists()


def test_a_corner_map_says_it_sets_the_scenarios_start_aside():
    from sim.studies.jumpmap import start_note
    corner = {"body": {"mount": "floor", "balance_on": "corner"}, "trial": {"start": {"resting_on": "face"}}}
    assert start_note(corner) == ("note: trial.start {resting_on: face} is not used: the map's cells start at rest "
                                  "on the balance edge (the edge-to-corner jump, one attempt each)")
    assert start_note({**corner, "trial": {"start": {"resting_on": "edge"}}}) is None
    assert start_note({**corner, "trial": {}}) is None
    edge = {"body": {"mount": "floor", "balance_on": "edge"}, "trial": {"start": {"resting_on": "face"}}}
    assert start_note(edge) is None        # an edge device's cells keep the scenario's start
