"""What a person reads: JSON numbers without binary noise, tables that never cut a criterion's name."""

from __future__ import annotations

import json
import math

from sim.core.outputs import clean_json, write_json


def test_json_has_no_negative_zero_and_no_binary_noise_in_times(tmp_path):
    dt = 0.001
    data = {"caught_at_s": 351 * dt, "zero": -0.0, "tiny_negative": -1e-300, "pi": math.pi,
            "nested": [{"t_s": 3 * 0.1}], "nan": float("nan")}
    assert 351 * dt == 0.35100000000000003 and 3 * 0.1 == 0.30000000000000004   # the noise this removes
    write_json(tmp_path / "m.json", data)
    text = (tmp_path / "m.json").read_text()
    assert '"caught_at_s": 0.351' in text and '"t_s": 0.3' in text
    assert "-0.0" not in text and '"nan": null' in text
    back = json.loads(text)
    assert back["pi"] == float(f"{math.pi:.15g}") and back["tiny_negative"] == -1e-300
    assert clean_json(-0.0) == 0.0 and math.copysign(1.0, clean_json(-0.0)) == 1.0


def test_check_table_keeps_every_criterion_name_whole_at_80_columns(monkeypatch, capsys, tmp_path):
    from sim.studies.verdict_report import print_verdict

    monkeypatch.setenv("COLUMNS", "80")
    names = ["monte_carlo_pass_fraction", "wheel_burst_safety_factor", "max_push_survived_n_m_s",
             "winding_temperature_c", "voltage_headroom"]
    crit = [{"name": n, "value": 0.5, "limit": 1.0, "passed": False,
             "note": "a long note about what the battery found in this run, " * 3} for n in names]
    print_verdict({"name": "narrow", "strategy": "lqr", "passed": False, "criteria": crit}, tmp_path)
    out = capsys.readouterr().out
    # every line fits, but the one naming the files: a path is printed whole so it can be copied
    assert max(len(line) for line in out.splitlines() if not line.startswith("wrote ")) <= 80
    assert f"wrote {tmp_path}/verdict.json" in out
    table = out.split("└")[0]
    for n in names:
        assert f"│ {n}" in table    # whole, in the table's first column
        assert f"{n}: a long note" in out


def test_clip_bars_show_the_supply_as_given():
    from types import SimpleNamespace

    from sim.media.overlay import bar_texts

    volts, amps = bar_texts(SimpleNamespace(voltage_v=-3.456, supply_v=11.1, current_a=0.5, current_limit_a=2.25))
    assert volts == "-3.46 V / 11.1 V" and amps == "+0.50 A / 2.25 A"
