"""The trace: long trials are backed by a temporary file, with the same numbers and the same CSV."""

from __future__ import annotations

import os

import numpy as np
import pytest

from sim.model.scenario import validate_scenario
from sim.model.scenario_yaml import load_raw
from sim.run import trace as trace_mod
from sim.run.trace import Trace, write_csv
from sim.run.trial import run_trial


def _short_scenario():
    raw, where = load_raw(None, ("strategy={kind: lqr}", "trial.pushes=[]", "trial.start.angle=3 deg",
                                 "trial.duration=0.5"))
    return validate_scenario(raw, where=where)


def test_long_trace_is_file_backed_and_writes_the_same_csv(tmp_path, monkeypatch):
    sc = _short_scenario()
    in_memory = run_trial(sc, seed=3)
    assert not in_memory.trace.file_backed
    monkeypatch.setattr(trace_mod, "IN_MEMORY_ROWS", 100)   # this 500-row trial now counts as long
    on_file = run_trial(sc, seed=3)
    assert on_file.trace.file_backed
    write_csv(in_memory.trace, tmp_path / "a.csv")
    write_csv(on_file.trace, tmp_path / "b.csv")
    assert (tmp_path / "a.csv").read_bytes() == (tmp_path / "b.csv").read_bytes()
    assert on_file.trace.n == 500


def test_csv_blocks_join_without_gaps_or_repeats(tmp_path, monkeypatch):
    monkeypatch.setattr(trace_mod, "CSV_BLOCK_ROWS", 7)     # 50 rows: 7 full blocks and one of 1
    tr = Trace(60, step_s=0.01)
    tr.n = 50
    tr.t[:50] = np.arange(50) * 0.01
    tr.angle[:50] = np.linspace(-4, 4, 50)                  # crosses the wrap at +-pi
    tr.mode[:50] = np.arange(50) % 2
    tr.phases = ["swing", "balance"]
    write_csv(tr, tmp_path / "t.csv")
    lines = (tmp_path / "t.csv").read_text().splitlines()
    assert len(lines) == 51
    body = np.array([[float(x) for x in line.split(",")[:-1]] for line in lines[1:]])
    # written with 9 significant digits: rtol 1e-8; angles wrapped to [-pi, pi) (README, trace.csv)
    np.testing.assert_allclose(body[:, 0], tr.t[:50], rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(body[:, 1], np.remainder(tr.angle[:50] + np.pi, 2 * np.pi) - np.pi, rtol=1e-8, atol=1e-12)
    assert [line.rsplit(",", 1)[1] for line in lines[1:]] == ["swing", "balance"] * 25


def test_shared_trace_shows_a_forked_childs_rows():
    if not hasattr(os, "fork"):
        pytest.skip("needs fork")
    tr = Trace(10, step_s=0.001, shared=True)
    pid = os.fork()
    if pid == 0:  # the child writes one value and leaves at once
        tr.rate[3] = 42.0
        os._exit(0)
    os.waitpid(pid, 0)
    assert tr.rate[3] == 42.0
    plain = Trace(10, step_s=0.001)
    pid = os.fork()
    if pid == 0:
        plain.rate[3] = 42.0
        os._exit(0)
    os.waitpid(pid, 0)
    assert plain.rate[3] == 0.0  # the control: without sharing the parent sees nothing


def _csv_as_before(trace: Trace, path) -> None:
    """trace.csv as it was written before phase names were quoted (kept here as the reference):
    each row "%.9g" per number, then the phase name as it is."""
    names = list(trace_mod.CSV_COLUMNS[:-1])
    cols = trace.columns()
    fmt = ",".join(["%.9g"] * len(names)) + ",%s\n"
    modes = trace.modes()
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(names + ["mode"]) + "\n")
        for k in range(trace.n):
            fh.write(fmt % (*(float(cols[n][k]) for n in names), modes[k]))


def test_the_default_demo_writes_the_same_csv_bytes_as_before(tmp_path):
    # quoting phase names with the csv module must not move a byte of an ordinary trace
    raw, where = load_raw(None)
    result = run_trial(validate_scenario(raw, where=where))
    assert len(result.trace.phases) >= 2            # the demo swings up and then balances: several names
    write_csv(result.trace, tmp_path / "now.csv")
    _csv_as_before(result.trace, tmp_path / "before.csv")
    assert (tmp_path / "now.csv").read_bytes() == (tmp_path / "before.csv").read_bytes()


def test_phase_names_that_csv_must_quote_read_back_whole(tmp_path):
    import csv

    names = ["plain", "a,b", 'say "hi"', "two\nlines", "cr\rlf", "", " spaced ", "[/]"]
    tr = Trace(len(names), step_s=0.01)
    tr.n = len(names)
    for name in names:
        tr.mode[tr.phase_code(name)] = tr.phase_code(name)
    write_csv(tr, tmp_path / "t.csv")
    with open(tmp_path / "t.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert [row[-1] for row in rows[1:]] == names and all(len(row) == 13 for row in rows)


def test_distinct_phases_are_bounded():
    tr = Trace(1, step_s=0.01)
    codes = [tr.phase_code(f"p{i}") for i in range(trace_mod.MAX_PHASES + 500)]
    assert codes[: trace_mod.MAX_PHASES] == list(range(trace_mod.MAX_PHASES))
    assert set(codes[trace_mod.MAX_PHASES:]) == {trace_mod.MAX_PHASES}
    assert tr.phases[-1] == trace_mod.OVERFLOW_PHASE and len(tr.phases) == trace_mod.MAX_PHASES + 1
    assert tr.phase_code("p3") == 3                 # a known name keeps its code after the overflow
    assert tr.phase_code("x" * 1000) == trace_mod.MAX_PHASES
    fresh = Trace(1, step_s=0.01)
    assert fresh.phases[fresh.phase_code("y" * 1000)] == "y" * trace_mod.MAX_PHASE_CHARS
