"""`wheelbench apply` and the scenario editor behind it (sim/model/scenario_edit.py); `fit` merging through it.

A patch changes values and nothing else: comments, key order and layout stay as the author wrote
them; a key that replaces another (k_e for Kv) takes its place and its tolerance; a plug-in path
still finds its file from the new file's folder; an invalid result writes nothing.
"""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
import yaml
from numpy.testing import assert_allclose

from sim.cli import main
from sim.model.scenario_yaml import load_scenario

PLUGINS = Path(__file__).parent / "plugins"

SCENARIO = """\
# A bench pendulum of our own, described by hand (the comments must survive a patch).
name: edit test
body:
  parts:
    - {name: arm, shape: rod, length: 200 mm, radius: 4 mm, material: aluminium, at: 100 mm}   # 8 mm rod
  pivot_friction: {coulomb: 0.2 mN*m, viscous: 1e-5 N*m*s/rad}

wheel:
  at: 200 mm
  parts:
    - {name: rim, shape: ring, outer_radius: 60 mm, inner_radius: 50 mm, thickness: 6 mm, material: PLA}

motor:
  speed_constant: 300 rpm/V   # from the datasheet
  resistance: 2 ohm
  current_limit: 3 A

drive:
  supply: 12 V

# keep this line
strategy: {kind: lqr}

trial:
  duration: 1 s
  start: {angle: 2 deg}

tolerances:
  motor.speed_constant: 5%    # datasheet spread
  motor.resistance: 10%
"""


def _scenario(tmp_path: Path, text: str = SCENARIO, name: str = "pend.yaml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def _patch(tmp_path: Path, mapping: dict, name: str = "patch.yaml") -> Path:
    path = tmp_path / name
    path.write_text(yaml.safe_dump(mapping))
    return path


def test_values_change_and_every_comment_and_other_line_stays(tmp_path):
    scen = _scenario(tmp_path)
    patch = _patch(tmp_path, {"motor": {"resistance": 2.25}, "body": {"pivot_friction": {"viscous": 3e-5}}})
    out = tmp_path / "patched.yaml"
    assert main(["apply", str(scen), str(patch), "--out", str(out)]) == 0
    before, after = SCENARIO.splitlines(), out.read_text().splitlines()
    assert len(before) == len(after)
    changed = [(a, b) for a, b in zip(before, after) if a != b]
    # exactly the two lines that hold the patched values changed
    assert [b.split(":")[0].strip() for _, b in changed] == ["pivot_friction", "resistance"]
    assert all(line in after for line in before if line.lstrip().startswith("#"))
    sc = load_scenario(out)
    assert_allclose(sc.motor.resistance, 2.25, rtol=1e-12)
    assert_allclose(sc.body.pivot_friction.viscous, 3e-5, rtol=1e-12)
    assert_allclose(sc.body.pivot_friction.coulomb, 0.2e-3, rtol=1e-12)   # the untouched half of the flow map


def test_back_emf_replaces_speed_constant_in_place_with_its_relative_tolerance(tmp_path):
    scen = _scenario(tmp_path)
    patch = _patch(tmp_path, {"motor": {"back_emf_constant": 0.0301}})
    out = tmp_path / "patched.yaml"
    assert main(["apply", str(scen), str(patch), "--out", str(out)]) == 0
    text = out.read_text()
    assert "speed_constant" not in text
    lines = text.splitlines()
    # the new key stands where the old one stood, with the old one's comment
    assert lines.index("  back_emf_constant: 0.0301   # from the datasheet") == SCENARIO.splitlines().index(
        "  speed_constant: 300 rpm/V   # from the datasheet")
    sc = load_scenario(out)
    assert_allclose(sc.motor.k_e, 0.0301, rtol=1e-12)
    assert sc.tolerances["motor.back_emf_constant"] == "5%"
    assert "motor.speed_constant" not in sc.tolerances


def test_an_absolute_tolerance_on_a_replaced_key_is_dropped_with_a_note(tmp_path, capsys):
    scen = _scenario(tmp_path, SCENARIO.replace("motor.speed_constant: 5%", "motor.speed_constant: 15 rpm/V"))
    patch = _patch(tmp_path, {"motor": {"back_emf_constant": 0.0301}})
    out = tmp_path / "patched.yaml"
    assert main(["apply", str(scen), str(patch), "--out", str(out)]) == 0
    assert "was dropped" in capsys.readouterr().out
    assert set(load_scenario(out).tolerances) == {"motor.resistance"}


def test_plugin_paths_are_rewritten_for_the_new_folder(tmp_path, capsys, monkeypatch):
    src_dir, dest_dir = tmp_path / "team" / "scenarios", tmp_path / "elsewhere" / "deep"
    src_dir.mkdir(parents=True)
    dest_dir.mkdir(parents=True)
    shutil.copy(PLUGINS / "simple_laws.py", src_dir / "laws.py")
    scen = _scenario(src_dir, SCENARIO.replace("strategy: {kind: lqr}",
                                               'strategy: {plugin: "laws.py:ProportionalDamping", gain: 40}'))
    patch = _patch(tmp_path, {"motor": {"resistance": 2.5}})
    out = dest_dir / "patched.yaml"
    assert main(["apply", str(scen), str(patch), "--out", str(out)]) == 0
    assert "../../team/scenarios/laws.py:ProportionalDamping" in out.read_text()
    assert "--allow-plugins-outside" in capsys.readouterr().out   # the plug-in now lies outside the file's folder
    from sim.strategies import ALLOW_OUTSIDE_ENV
    monkeypatch.setenv(ALLOW_OUTSIDE_ENV, "1")
    sc = load_scenario(out)
    assert sc.strategy.cls.__name__ == "ProportionalDamping" and sc.strategy.params.gain == 40


def test_invalid_result_writes_nothing_and_in_place_keeps_the_file(tmp_path, capsys):
    scen = _scenario(tmp_path)
    bad = _patch(tmp_path, {"motor": {"resistance": -1.0}})
    out = tmp_path / "patched.yaml"
    assert main(["apply", str(scen), str(bad), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "motor.resistance" in err[0]
    assert not out.exists()
    assert main(["apply", str(scen), str(bad), "--in-place"]) == 2
    assert scen.read_text() == SCENARIO
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []   # no temporaries left


def test_in_place_stdout_and_existing_out(tmp_path, capsys):
    scen = _scenario(tmp_path)
    patch = _patch(tmp_path, {"drive": {"supply": 11.1}})
    assert main(["apply", str(scen), str(patch)]) == 0
    assert "supply: 11.1" in capsys.readouterr().out and scen.read_text() == SCENARIO   # printed, not written
    existing = tmp_path / "mine.yaml"
    existing.write_text("my own file\n")
    assert main(["apply", str(scen), str(patch), "--out", str(existing)]) == 2
    assert existing.read_text() == "my own file\n"
    assert main(["apply", str(scen), str(patch), "--in-place"]) == 0
    assert_allclose(load_scenario(scen).drive.supply, 11.1, rtol=1e-12)
    assert "# keep this line" in scen.read_text()


def test_patches_merge_in_order(tmp_path):
    scen = _scenario(tmp_path)
    first = _patch(tmp_path, {"drive": {"supply": 11.1}, "motor": {"resistance": 2.5}}, "a.yaml")
    second = _patch(tmp_path, {"drive": {"supply": 10.0}}, "b.yaml")
    out = tmp_path / "patched.yaml"
    assert main(["apply", str(scen), str(first), str(second), "--out", str(out)]) == 0
    sc = load_scenario(out)
    assert (sc.drive.supply, sc.motor.resistance) == (10.0, 2.5)


def test_a_patch_that_is_not_a_mapping_is_refused(tmp_path, capsys):
    scen = _scenario(tmp_path)
    bad = tmp_path / "list.yaml"
    bad.write_text("- 1\n- 2\n")
    assert main(["apply", str(scen), str(bad)]) == 2
    assert "list.yaml" in capsys.readouterr().err


# ----------------------------------------------------------------------------- fit through the editor

def test_fit_with_a_tolerance_on_the_replaced_key_writes_everything(tmp_path):
    from test_fitting import _save, spin_up_log
    from conftest import scenario_dict, write_scenario

    mapping = scenario_dict(body={"locked": True})
    mapping["tolerances"] = {"motor.speed_constant": "5%"}
    scen = write_scenario(tmp_path / "bench.yaml", mapping)
    csv = _save(tmp_path / "spin.csv", spin_up_log())
    out = tmp_path / "fit"
    assert main(["fit", csv, "--test", "spin-up", "--scenario", str(scen), "--out", str(out)]) == 0
    assert {p.name for p in out.iterdir()} >= {"fit.json", "fit.png", "patch.yaml", "scenario_fitted.yaml"}
    fitted = load_scenario(out / "scenario_fitted.yaml")
    assert fitted.tolerances == {"motor.back_emf_constant": "5%"}
    notes = json.loads((out / "fit.json").read_text())["notes"]
    assert any("now applies to motor.back_emf_constant" in n for n in notes)


def test_free_swing_without_a_scenario_says_there_is_nothing_to_patch(tmp_path, capsys):
    from test_fitting import _save, swing_log

    log = swing_log(w0=2 * math.pi / 0.8, zeta=0.01, e=0.0, amplitude_deg=20.0)
    csv = _save(tmp_path / "swing.csv", log)
    out = tmp_path / "fit"
    assert main(["fit", csv, "--test", "free-swing", "--out", str(out)]) == 0
    said = capsys.readouterr().out
    assert "nothing to patch" in said and "--scenario" in said
    patch_text = (out / "patch.yaml").read_text()
    assert "nothing to patch" in patch_text and yaml.safe_load(patch_text) == {}
    assert not (out / "scenario_fitted.yaml").exists()
    assert np.isfinite(json.loads((out / "fit.json").read_text())["fitted"]["damping_ratio"]["value"])
