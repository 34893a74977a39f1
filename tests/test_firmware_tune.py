"""`tune` and `sweep` over a firmware's defines (sim.studies.tune with sim.strategies.firmware).

The firmware is built here: the test pendulum's LQR law (gains from sim.strategies.lqr_design,
handed in as the defines K0..K2) with its voltage capped at supply * (1 - |P - 0.3|). The largest
push a law survives grows with the voltage it may use (more authority over the same disturbance:
common practice, no source), so P = 0.3 is the best P and P = 0.9 a poor start.
"""

from __future__ import annotations

import csv
import json
import shutil
from pathlib import Path

import pytest
import yaml

from sim.cli import main
from sim.model.device import Device
from sim.model.scenario_yaml import load_scenario
from sim.strategies.lqr_design import design_lqr
from conftest import scenario_dict, write_scenario

pytestmark = pytest.mark.skipif(shutil.which("cc") is None and shutil.which("gcc") is None,
                                reason="needs a C compiler (.ci/run installs one)")

CAPPED = r"""
#include <math.h>
#if N_PHASE < 1 || N_PHASE > 255      /* the preprocessor takes whole numbers only: "2.0" fails here */
#error "N_PHASE must be a phase number"
#endif
static float supply;
void wb_init(const wb_config_t *cfg) { supply = cfg->supply_v; }
void wb_step(const wb_input_t *in, wb_output_t *out) {
    float v = -(float)(K0 * in->angle_rad + K1 * in->rate_rad_s + K2 * in->wheel_speed_rad_s);
    float cap = supply * (1.0f - fabsf((float)P - 0.3f));
    out->volts = v > cap ? cap : (v < -cap ? -cap : v);
    out->phase = N_PHASE;
}
"""
ALU_WHEEL = {"parts": [{"name": "disk", "shape": "disk", "radius": 0.05, "thickness": 0.005, "material": "aluminium"}]}


def capped_scenario(folder: Path, *, defines: dict | None = None) -> Path:
    """The shared test pendulum (conftest) with a wheel of known strength and short holds, as in
    tests/test_tune.py, run by the capped firmware. The source lies in a folder of its own, one
    level below the scenario, so that a scenario written elsewhere must find it again."""
    (folder / "fw").mkdir(exist_ok=True)
    (folder / "fw" / "capped.c").write_text(CAPPED)
    raw = scenario_dict(wheel=ALU_WHEEL, sensors={"rate": 250}, trial={"duration": 1.0, "start": {"angle": 0.05}},
                        requirements={"hold_time": 5.0}, strategy={"kind": "lqr"})
    path = write_scenario(folder / "s.yaml", raw)
    K = design_lqr(Device.from_scenario(load_scenario(path))).K_discrete
    raw["strategy"] = {"kind": "firmware", "sources": ["fw/capped.c"], "include": ["fw"],
                       "defines": {"K0": float(K[0]), "K1": float(K[1]), "K2": float(K[2]), "P": 0.9, "N_PHASE": 1,
                                   **(defines or {})}}
    return write_scenario(path, raw)


def _rows(path: Path) -> list[dict]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.mark.slow
def test_a_tune_moves_a_define_and_the_winners_scenario_compiles_what_was_judged(tmp_path, capsys):
    path = capped_scenario(tmp_path)
    out = tmp_path / "tune"
    code = main(["tune", str(path), "--out", str(out), "--only", "--param", "strategy.defines.P=0..1",
                 "--trials", "6", "--workers", "2", "--mc-trials", "1", "--seed", "3"])
    assert code == 0, capsys.readouterr().err
    rows = _rows(out / "tune.csv")
    assert len(rows) == 6
    # the scenario's own value is the first evaluation; the search then moved it
    assert float(rows[0]["strategy.defines.P"]) == 0.9
    assert len({r["strategy.defines.P"] for r in rows}) == 6
    best = max((r for r in rows if r["feasible"] == "True"), key=lambda r: float(r["push_N_m_s"]))
    p_best = float(best["strategy.defines.P"])
    assert float(best["push_N_m_s"]) > float(rows[0]["push_N_m_s"])
    assert abs(p_best - 0.3) < abs(0.9 - 0.3)
    # the patch and the scenario carry the value judged, every other define exactly as it was
    given = yaml.safe_load(path.read_text())["strategy"]["defines"]
    patch = yaml.safe_load((out / "best_patch.yaml").read_text())
    assert patch["strategy"]["defines"] == {**given, "P": p_best}
    best_sc = load_scenario(out / "best_scenario.yaml")          # its source paths rewritten for its folder
    assert best_sc.strategy.params.defines == {**given, "P": p_best}
    assert best_sc.strategy.params.sources == [str((tmp_path / "fw" / "capped.c").resolve())]
    assert not best_sc.strategy.params.build.compiled_now    # the very build the tune compiled and judged
    verdict = json.loads((out / "verdict.json").read_text())
    assert verdict["max_push_survived_n_m_s"] == float(best["push_N_m_s"])   # no sensor noise: seed-free


def test_integer_defines_are_searched_over_whole_numbers(tmp_path, capsys):
    from optuna.distributions import FloatDistribution, IntDistribution

    from sim.studies.tune import search_setup
    from sim.studies.tune_study import distributions
    path = capped_scenario(tmp_path)
    raw = yaml.safe_load(path.read_text())
    setup = search_setup(raw, str(path), param_texts=["strategy.defines.N_PHASE=1.5..7.9", "strategy.defines.P=0..1",
                                                      "strategy.defines.EXTRA=1..4"], only=True, objective="push")
    n, p, extra = setup.params
    assert (n.integer, n.low, n.high, n.start) == (True, 2.0, 7.0, None)   # 1 lies outside 2..7: no start
    assert (p.integer, p.start, p.as_written) == (False, 0.9, True)
    assert (extra.integer, extra.start) == (False, None)      # not in the scenario: real numbers, no start
    dists = distributions(setup.params)
    assert isinstance(dists[n.key], IntDistribution) and isinstance(dists[p.key], FloatDistribution)
    assert n.assigned(4) == 4 and isinstance(n.assigned(4), int)
    assert p.assigned(0.123456789) == 0.1234568          # as best_patch.yaml writes it (7 digits)
    # a range holding no two whole numbers is bad input: one line, exit 2, nothing written
    out = tmp_path / "tune"
    assert main(["tune", str(path), "--out", str(out), "--only", "--param", "strategy.defines.N_PHASE=1.2..1.8"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "strategy.defines.N_PHASE" in err[0] and "whole numbers" in err[0]
    assert not out.exists()


def test_default_space_of_a_firmware_is_its_positive_real_defines(tmp_path):
    from sim.studies.tune import default_space
    sc = load_scenario(capped_scenario(tmp_path))
    space = default_space(sc, Device.from_scenario(sc))
    # K0..K2 are negative and N_PHASE an integer: only P, a decade either side of 0.9
    assert [(q.key, q.low, q.high, q.log, q.start) for q in space] == [("strategy.defines.P", 0.09, 9.0, True, 0.9)]


def test_a_sweep_over_a_define_reaches_the_firmware(tmp_path, capsys):
    path = capped_scenario(tmp_path)
    out = tmp_path / "sweep"
    assert main(["sweep", str(path), "--vary", "strategy.defines.P=0.3..0.9:2", "--out", str(out), "--workers", "1"]) == 0
    rows = {float(r["strategy.defines.P"]): r for r in _rows(out / "results.csv")}
    assert sorted(rows) == [0.3, 0.9]
    # A winding fed at most V volts carries at most (V + k_e |w|) / R: the DC motor with inductance
    # neglected, i = (V - k_e w) / R on the relative wheel speed (shared/references.md, "DC motor").
    # The test motor: k_e = 1 / (300 rpm/V) = 0.031831 V s/rad, R = 2 ohm (tests/conftest.py).
    k_e, r_ohm = 60 / (2 * 3.141592653589793 * 300), 2.0

    def bound(cap_v, row):
        return (cap_v + k_e * float(row["peak_wheel_speed_rad_s"])) / r_ohm

    capped = rows[0.9]
    assert float(capped["peak_current_a"]) <= bound(12.0 * (1 - 0.6), capped) * (1 + 1e-9)
    # at P = 0.3 the cap is the supply: the 0.05 rad start asks for more than the P = 0.9 cap allows
    assert float(rows[0.3]["peak_current_a"]) > bound(12.0 * (1 - 0.6), rows[0.3])


def test_apply_to_another_folder_keeps_the_firmware_found(tmp_path, capsys):
    # sources and include are relative to the scenario file: a scenario written elsewhere (apply
    # --out, tune's best_scenario.yaml) names them relative to its own folder
    path = capped_scenario(tmp_path)
    (tmp_path / "patch.yaml").write_text("strategy:\n  defines:\n    P: 0.4\n")
    out = tmp_path / "elsewhere" / "deeper" / "patched.yaml"
    out.parent.mkdir(parents=True)
    assert main(["apply", str(path), str(tmp_path / "patch.yaml"), "--out", str(out)]) == 0, capsys.readouterr().err
    strategy = yaml.safe_load(out.read_text())["strategy"]
    assert strategy["sources"] == ["../../fw/capped.c"] and strategy["include"] == ["../../fw"]
    sc = load_scenario(out)
    assert sc.strategy.params.sources == [str((tmp_path / "fw" / "capped.c").resolve())]
    assert sc.strategy.params.defines["P"] == 0.4
