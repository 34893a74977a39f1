"""Sweeps: --vary parsing, results table, resume after a real kill, worker-count independence, dask."""

import csv
import os
import signal
import subprocess
import sys

import numpy as np
import pytest

from sim.cli import main
from sim.core.errors import InputError
from sim.model.scenario_yaml import load_raw
from sim.studies.sweep import JOURNAL, parse_vary, run_sweep
from test_verdicts import fast_raw, write_scenario

VARY = "drive.supply=6V..12V:6"


def read_rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_parse_vary_ranges_lists_and_errors():
    v = parse_vary("drive.supply=6V..24V:4")
    assert v.key == "drive.supply" and v.path == ("drive", "supply") and len(v.values) == 4
    from sim.core.units import parse_quantity
    np.testing.assert_allclose([parse_quantity(x, "voltage") for x in v.values], [6, 12, 18, 24], rtol=1e-12)
    mixed = parse_vary("motor.resistance=500 mohm..2 ohm:4")     # HI converted to LO's unit
    np.testing.assert_allclose([parse_quantity(x, "resistance") for x in mixed.values], [0.5, 1.0, 1.5, 2.0], rtol=1e-12)
    assert parse_vary("sensors.rate=250,500").values == (250, 500)
    assert parse_vary("strategy.kind=lqr,pid").values == ("lqr", "pid")
    assert parse_vary("wheel.parts[0].thickness=0.004..0.008:3").values == (0.004, 0.006, 0.008)
    for bad in ("drive.supply", "drive.supply=", "drive.supply=6V..2A:3", "drive.supply=1..2:0", "[0]=1,2"):
        with pytest.raises(InputError):
            parse_vary(bad)


def test_bad_vary_value_is_refused_before_running(tmp_path, capsys):
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    out = tmp_path / "out"
    assert main(["sweep", scen, "--vary", "drive.suply=6V,12V", "--out", str(out), "--workers", "1"]) == 2
    assert "drive.suply" in capsys.readouterr().err
    assert main(["sweep", scen, "--vary", "drive.supply=-3V,12V", "--out", str(out), "--workers", "1"]) == 2
    assert not (out / "results.csv").exists()


def test_bare_numbers_over_a_value_with_a_unit_get_a_note(tmp_path, capsys):
    # a bare number is SI (rad/s per volt for a speed constant): over a file's "... rpm/V" a user who meant
    # rpm/V gets a motor ten times too fast, and every point of the sweep fell. 1 rpm/V = 2 pi / 60 rad/s/V
    # (definition of the revolution and the minute)
    from sim.model.overrides import bare_number_note
    raw = {"motor": {"speed_constant": "400 rpm/V", "resistance": "1.2 ohm"}, "drive": {"supply": 12}}
    note = bare_number_note(raw, ["motor", "speed_constant"], [300], option="--vary", text="motor.speed_constant=300")
    assert note.startswith("note: --vary motor.speed_constant=300") and f"300 = {300 * 60 / (2 * np.pi):.4g} rpm/V" in note
    assert bare_number_note(raw, ["motor", "resistance"], [1.5], option="--set", text="x") is None   # SI already
    assert bare_number_note(raw, ["drive", "supply"], [24], option="--set", text="x") is None        # no unit in the file
    assert bare_number_note(raw, ["motor", "speed_constant"], ["300 rpm/V"], option="--set", text="x") is None
    raw_file = fast_raw()
    raw_file["wheel"]["parts"][0]["thickness"] = "5 mm"
    scen = write_scenario(tmp_path / "s.yaml", raw_file)
    assert main(["sweep", scen, "--vary", "wheel.parts[0].thickness=0.004,0.006", "--out", str(tmp_path / "o"),
                 "--workers", "1"]) in (0, 1)
    err = capsys.readouterr().err
    assert "note: --vary wheel.parts[0].thickness=...: a bare number is in SI units (0.004 = 4 mm" in err


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """An uninterrupted one-worker sweep (the reference table for the other tests)."""
    d = tmp_path_factory.mktemp("sweep")
    scen = write_scenario(d / "s.yaml", fast_raw())
    assert main(["sweep", scen, "--vary", VARY, "--out", str(d / "ref"), "--workers", "1"]) == 0
    return scen, d, read_rows(d / "ref" / "results.csv")


def test_reference_table_columns_and_values(reference):
    _, d, rows = reference
    assert list(rows[0])[:3] == ["drive.supply", "point", "seed"]
    # Column holds the SI value of each point: 6..12 V in six steps.
    np.testing.assert_allclose([float(r["drive.supply"]) for r in rows], np.linspace(6, 12, 6), rtol=1e-12)
    assert [int(r["point"]) for r in rows] == list(range(6))
    assert all(r["outcome"] == "balanced" for r in rows)
    # No-load speed = V * Kv (references.md, "Motor"), so the margin grows with the supply.
    margins = [float(r["wheel_speed_margin"]) for r in rows]
    assert margins == sorted(margins)
    # the figure draws the margin (ink) and settle time (accent) lines; every point passed, so no
    # failure cross (limit red) appears
    from pictures import pixels_near
    from sim.media.plots import ACCENT, INK, LIMIT
    png = d / "ref" / "sweep.png"
    assert all(r["passed"] == "True" for r in rows)
    assert pixels_near(png, INK) > 300 and pixels_near(png, ACCENT) > 300
    assert pixels_near(png, LIMIT, tol=20 / 255) == 0


@pytest.mark.slow
def test_resume_after_a_real_kill_gives_the_same_table(reference, tmp_path):
    scen, _, ref_rows = reference
    out = tmp_path / "killed"
    # The sweep kills itself (SIGKILL, no clean-up runs) right after its second point reaches the
    # journal: the kill lands mid-way by construction, not by the luck of polling a fast sweep.
    child = ("import os, signal, sys\n"
             "import sim.studies.sweep as sw\n"
             "add = sw.Journal.add\n"
             "def add_then_die(self, index, row):\n"
             "    add(self, index, row)\n"
             "    self.count = getattr(self, 'count', 0) + 1\n"
             "    if self.count == 2:\n"
             "        os.kill(os.getpid(), signal.SIGKILL)\n"
             "sw.Journal.add = add_then_die\n"
             "from sim.cli import main\n"
             "sys.exit(main(sys.argv[1:]))\n")
    cmd = [sys.executable, "-c", child, "sweep", scen, "--vary", VARY, "--out", str(out), "--workers", "1"]
    proc = subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, timeout=300)
    assert proc.returncode == -signal.SIGKILL
    journal = out / JOURNAL
    done_before = journal.read_text().count("\n") - 1
    assert done_before == 2, "the kill must land mid-way for this test to mean anything"
    assert main(["sweep", scen, "--vary", VARY, "--out", str(out), "--workers", "1"]) == 0
    rows = read_rows(out / "results.csv")
    assert [r["point"] for r in rows] == [str(i) for i in range(6)]      # complete, no duplicates
    assert rows == ref_rows
    lines = journal.read_text().splitlines()
    assert len(lines) == 1 + 6      # finished points were skipped, not run again


@pytest.mark.slow
def test_two_workers_give_the_same_table(reference, tmp_path):
    scen, _, ref_rows = reference
    assert main(["sweep", scen, "--vary", VARY, "--out", str(tmp_path / "two"), "--workers", "2"]) == 0
    assert read_rows(tmp_path / "two" / "results.csv") == ref_rows


@pytest.mark.slow
def test_dask_local_cluster_gives_the_same_table(reference, tmp_path):
    distributed = pytest.importorskip("distributed")
    scen, _, ref_rows = reference
    raw, where = load_raw(scen)
    with distributed.LocalCluster(processes=False, n_workers=1, threads_per_worker=1,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        out = tmp_path / "dask"
        out.mkdir()
        run_sweep(raw, where, [parse_vary(VARY)], out, cluster=client)
    assert read_rows(out / "results.csv") == ref_rows


@pytest.mark.slow
def test_two_keys_with_monte_carlo_trials(tmp_path):
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    out = tmp_path / "grid"
    assert main(["sweep", scen, "--vary", "drive.supply=3V,12V", "--vary", "motor.resistance=1.8,3",
                 "--trials", "1", "--out", str(out), "--workers", "1"]) == 0
    rows = read_rows(out / "results.csv")
    assert list(rows[0])[:2] == ["drive.supply", "motor.resistance"]
    assert [(float(r["drive.supply"]), float(r["motor.resistance"])) for r in rows] == [(3, 1.8), (3, 3), (12, 1.8), (12, 3)]
    assert all(r["mc_trials"] == "1" and r["pass_fraction"] in ("0.0", "1.0") for r in rows)
    # the heat map shows the pass fractions on viridis (0..1): both ends appear, one cell each at least
    import matplotlib

    from pictures import pixels_near
    fractions = {float(r["pass_fraction"]) for r in rows}
    for f in (0.0, 1.0):
        shown = pixels_near(out / "sweep.png", matplotlib.colormaps["viridis"](f), tol=3 / 255)
        assert (shown > 2000) == (f in fractions), (f, shown)
    # Re-running a different sweep into the same folder is refused, not mixed in.
    assert main(["sweep", scen, "--vary", "drive.supply=3V,6V", "--out", str(out), "--workers", "1"]) == 2


def test_results_csv_is_written_in_point_order_from_an_unordered_journal(tmp_path):
    """The table is streamed from the journal, whose lines are in finishing order; a torn last line
    (a kill mid-write) is left out. Holds only one offset per point in memory."""
    import json

    from sim.studies.sweep import METRIC_COLUMNS, PointSummaries, read_journal, write_results_csv

    varies = [parse_vary("drive.supply=6,8,10"), parse_vary("sensors.rate=250,500")]   # 6 points
    spec = {"made": "by hand"}
    journal = tmp_path / JOURNAL
    lines = [json.dumps({"wheelbench_sweep": 1, "spec": spec})]
    for i in (4, 0, 5, 2):
        lines.append(json.dumps({"i": i, "row": {"point": i, "drive.supply": 6 + 2 * (i // 2), "passed": i % 2 == 0,
                                                 "wheel_speed_margin": 0.1 * i, "outcome": "balanced"}}))
    journal.write_text("\n".join(lines) + "\n" + '{"i": 3, "row": {"point": 3, "pas')   # torn
    write_results_csv(tmp_path / "results.csv", varies, journal)
    rows = read_rows(tmp_path / "results.csv")
    assert [int(r["point"]) for r in rows] == [0, 2, 4, 5]
    assert list(rows[0]) == ["drive.supply", "sensors.rate", *METRIC_COLUMNS]
    assert [r["wheel_speed_margin"] for r in rows] == ["0.0", "0.2", "0.4", "0.5"]

    points = PointSummaries(varies)
    read_journal(journal, spec, points)
    assert len(points) == 4 and points.n_passed == 3 and 3 not in points
    assert points.get(2)["wheel_speed_margin"] == pytest.approx(0.2) and points.get(3) is None
    assert points.get(2)["drive.supply"] == 8                  # on the first key's axis: its value is kept
    assert journal.read_text().endswith("}}\n")                # the torn line was cut off
    with pytest.raises(InputError, match="different sweep"):
        read_journal(journal, {"made": "otherwise"}, PointSummaries(varies))


# --------------------------------------------------------------------- robustness (issue 13 parts 7 and 8)

@pytest.fixture
def judged(monkeypatch):
    """Points judged without simulating (in-process, one worker): a record of the supplies judged;
    a supply of 11 V makes the point's work raise, as a value that breaks its trial does."""
    import sim.studies.monte_carlo
    calls = []

    def judge(sc, *, seed):
        calls.append(sc.drive.supply)
        if abs(sc.drive.supply - 11.0) < 1e-9:
            raise FloatingPointError("a value this trial cannot take")
        return {"outcome": "balanced", "fail_reasons": ""}
    monkeypatch.setattr(sim.studies.monte_carlo, "judge_trial", judge)
    return calls


def test_a_point_that_raises_is_its_outcome_and_the_sweep_goes_on(tmp_path, judged):
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    out = tmp_path / "out"
    argv = ["sweep", scen, "--vary", "drive.supply=10,11,12", "--out", str(out), "--workers", "1"]
    assert main(argv) == 0
    rows = read_rows(out / "results.csv")
    assert [r["outcome"] for r in rows] == ["balanced", "error", "balanced"]
    assert rows[1]["passed"] == "False" and "FloatingPointError: a value this trial cannot take" in rows[1]["message"]
    assert len(judged) == 3
    assert main(argv) == 0          # a resume finds every point finished, the bad one too
    assert len(judged) == 3
    assert read_rows(out / "results.csv") == rows


def test_a_second_sweep_into_a_folder_in_use_is_refused_or_waits(tmp_path, judged, capsys):
    import fcntl
    import threading

    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    out = tmp_path / "out"
    argv = ["sweep", scen, "--vary", "drive.supply=10,12", "--out", str(out), "--workers", "1"]
    assert main(argv) == 0
    fd = os.open(out / ".wheelbench-lock", os.O_RDWR)     # another sweep's hold on the folder
    fcntl.flock(fd, fcntl.LOCK_EX)
    try:
        capsys.readouterr()
        assert main(argv) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and "another wheelbench command" in err[0] and "--wait" in err[0]
        threading.Timer(0.5, os.close, args=(fd,)).start()   # the other sweep ends
        assert main(argv + ["--wait"]) == 0
    finally:
        try:
            os.close(fd)
        except OSError:
            pass


def test_a_full_disk_mid_sweep_is_one_line_with_resume_instructions(tmp_path, judged, capsys, monkeypatch):
    import errno

    import sim.studies.sweep
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    out = tmp_path / "out"
    argv = ["sweep", scen, "--vary", "drive.supply=10,12,14", "--out", str(out), "--workers", "1"]
    real_add = sim.studies.sweep.Journal.add

    def add_then_fill(self, index, row):
        if index > 0:
            raise OSError(errno.ENOSPC, "No space left on device")
        real_add(self, index, row)
    monkeypatch.setattr(sim.studies.sweep.Journal, "add", add_then_fill)
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "disk is full" in err[0] and "resume" in err[0] and "1 of 3 points" in err[0], err
    monkeypatch.setattr(sim.studies.sweep.Journal, "add", real_add)
    assert main(argv) == 0                                  # resumed: the finished point is not judged again
    assert len(judged) == 1 + 1 + 2
    assert [r["point"] for r in read_rows(out / "results.csv")] == ["0", "1", "2"]


def test_a_lost_dask_scheduler_is_one_line_with_resume_instructions(tmp_path, judged):
    distributed = pytest.importorskip("distributed")
    from sim.core.outputs import MachineFault, prepare_out_dir
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    raw, where = load_raw(scen)
    cluster = distributed.LocalCluster(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=None)
    client = distributed.Client(cluster)
    cluster.close()                                          # the scheduler goes away
    out = prepare_out_dir(tmp_path / "out")
    with pytest.raises(MachineFault) as info:
        run_sweep(raw, where, [parse_vary("drive.supply=10,12")], out, cluster=client)
    message = str(info.value)
    assert "lost the dask scheduler" in message and "resume" in message and "\n" not in message
    client.close()
