"""Output safety: atomic files, folders that never clobber a user's files, interrupted runs.

House style: "nothing half-written, nothing of the user's overwritten". The interruption test
kills a real `wheelbench run` with SIGKILL at seeded random moments and checks that every file
present is complete; SIGINT must clean up after itself.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import scenario_dict, write_scenario
from sim.core.errors import InputError
from sim.core.outputs import (LOCK, MARKER, atomic_path, prepare_out_dir, register_temp, release_locks, remove_stale_temps,
                              write_json, write_text)

TRACE_FIELDS = 13  # trace.csv columns (README "trace.csv")


def test_atomic_path_keeps_the_old_file_when_writing_fails(tmp_path):
    target = tmp_path / "metrics.json"
    target.write_text("old\n")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half of the new")
            raise RuntimeError("disk full, say")
    assert target.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["metrics.json"]


def test_atomic_write_replaces_whole_and_uses_umask_permissions(tmp_path):
    target = tmp_path / "a.txt"
    write_text(target, "first\n")
    write_text(target, "second\n")
    assert target.read_text() == "second\n"
    mask = os.umask(0o022)
    os.umask(mask)
    assert target.stat().st_mode & 0o777 == 0o666 & ~mask  # not mkstemp's owner-only 0600
    assert [p.name for p in tmp_path.iterdir()] == ["a.txt"]


def test_write_json_is_strict_json(tmp_path):
    import numpy as np

    write_json(tmp_path / "m.json", {"x_a": float("nan"), "y_v": np.float64(2.5), "n": np.int64(3),
                                    "ok": np.bool_(True), "arr": np.array([1.0, np.inf])})
    data = json.loads((tmp_path / "m.json").read_text())  # strict: no NaN/Infinity tokens
    assert data == {"x_a": None, "y_v": 2.5, "n": 3, "ok": True, "arr": [1.0, None]}


def test_out_folder_rules(tmp_path):
    fresh = prepare_out_dir(tmp_path / "new" / "deeper")
    assert (fresh / MARKER).exists()
    assert prepare_out_dir(fresh) == fresh  # ours: reused
    empty = tmp_path / "empty"
    empty.mkdir()
    prepare_out_dir(empty)  # empty: taken
    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="--force"):
        prepare_out_dir(foreign)
    assert [p.name for p in foreign.iterdir()] == ["notes.txt"]
    prepare_out_dir(foreign, force=True)
    assert (foreign / "notes.txt").read_text() == "mine"
    a_file = tmp_path / "file"
    a_file.write_text("x")
    with pytest.raises(InputError, match="not a folder"):
        prepare_out_dir(a_file)


def test_stale_temps_of_dead_writers_only_are_removed(tmp_path):
    out = prepare_out_dir(tmp_path / "o")
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    stale = out / f".trace.csv.{dead.pid}.abcd1234.tmp.csv"
    live = out / f".trace.csv.{os.getpid()}.abcd1234.tmp.csv"
    user = out / ".notes.tmp"
    for p in (stale, live, user):
        p.write_text("x")
    for p in (stale, live):  # as atomic_path does: entered in the registry before being created
        register_temp(out, p.name)
    assert remove_stale_temps(out) == [stale]
    assert live.exists() and user.exists() and not stale.exists()


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads Linux's /proc")
def test_temps_of_an_ended_but_unreaped_writer_are_removed(tmp_path):
    """A writer killed with its parent stays a zombie until whoever adopted it reaps it (in a
    container, maybe never): it runs no more, so its temporary files are stale too."""
    out = prepare_out_dir(tmp_path / "o")
    zombie = subprocess.Popen([sys.executable, "-c", "pass"])
    try:
        deadline = time.monotonic() + 30
        while "Z" not in Path(f"/proc/{zombie.pid}/stat").read_text().rsplit(")", 1)[1][:3]:
            assert time.monotonic() < deadline, "the child did not end"
            time.sleep(0.01)                              # ended, not reaped: a zombie
        stale = out / f".summary.png.{zombie.pid}.abcd1234.tmp.png"
        register_temp(out, stale.name)
        stale.write_text("x")
        assert remove_stale_temps(out) == [stale]
    finally:
        zombie.wait()


# --------------------------------------------------------------------- interrupted runs

def _check_complete(out, n_rows: int) -> list[str]:
    """The result files present in `out`, each checked to be whole."""
    present = sorted(p.name for p in out.iterdir() if not p.name.startswith("."))
    if "metrics.json" in present:
        json.loads((out / "metrics.json").read_text())
    if "trace.csv" in present:
        text = (out / "trace.csv").read_text()
        lines = text.split("\n")
        assert text.endswith("\n") and len(lines) - 1 == n_rows + 1  # header + one row per step
        assert all(line.count(",") == TRACE_FIELDS - 1 for line in lines[:-1])
    if "summary.png" in present:
        data = (out / "summary.png").read_bytes()
        assert data.startswith(b"\x89PNG") and data.endswith(b"IEND\xaeB`\x82")  # PNG end chunk
    return present


@pytest.mark.slow
def test_killed_run_leaves_complete_files_or_none(tmp_path):
    duration = 8.0
    scenario = write_scenario(tmp_path / "s.yaml", scenario_dict(trial={"duration": duration}))
    n_rows = int(round(duration / 0.001))
    argv = [sys.executable, "-m", "sim.cli", "run", str(scenario)]
    t0 = time.perf_counter()
    subprocess.run(argv + ["--out", str(tmp_path / "full")], check=True, capture_output=True, timeout=300)
    full = time.perf_counter() - t0
    assert _check_complete(tmp_path / "full", n_rows) == ["metrics.json", "summary.png", "trace.csv"]
    rng = random.Random(20261201)
    out = tmp_path / "killed"
    for _ in range(2):
        # late in the run, where the files are written (start-up and simulation come first)
        proc = subprocess.Popen(argv + ["--out", str(out)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        time.sleep(rng.uniform(0.6, 1.0) * full)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        if out.exists():
            _check_complete(out, n_rows)
    subprocess.run(argv + ["--out", str(out)], check=True, capture_output=True, timeout=300)
    assert _check_complete(out, n_rows) == ["metrics.json", "summary.png", "trace.csv"]
    assert sorted(p.name for p in out.iterdir() if p.name.startswith(".")) == [LOCK, MARKER]  # stale temps gone


@pytest.mark.slow
def test_interrupted_run_cleans_up(tmp_path):
    scenario = write_scenario(tmp_path / "s.yaml", scenario_dict(trial={"duration": 200.0}))
    out = tmp_path / "o"
    # a child of a background job inherits SIGINT ignored; Ctrl-C at a terminal is not ignored
    start = ("import signal, sys; signal.signal(signal.SIGINT, signal.default_int_handler); "
             "from sim.cli import main; sys.exit(main(sys.argv[1:]))")
    proc = subprocess.Popen([sys.executable, "-c", start, "run", str(scenario), "--out", str(out)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while not (out / MARKER).exists() and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)  # the folder exists: the simulation has begun
    time.sleep(0.3)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert err.strip().splitlines()[-1] == "wheelbench: interrupted"
    assert sorted(p.name for p in out.iterdir()) == [LOCK, MARKER]


# --------------------------------------------------------------------- registry of temporaries, locks

def _dead_pid() -> int:
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    return dead.pid


def test_force_removes_only_registered_temporaries(tmp_path):
    """Issue 13 part 8: a user's file that matches the temporary-name pattern, with a pid of no
    running process, survives a forced write; a temporary the registry proves ours does not."""
    folder = tmp_path / "mine"
    folder.mkdir()
    user = folder / ".notes.999999.keepthis.tmp"     # looks like ours: dot, name, pid, 8 chars, .tmp
    user.write_text("my notes")
    ours = folder / f".trace.csv.{_dead_pid()}.0badf00d.tmp.csv"
    register_temp(folder, ours.name)                  # (no marker yet: the hidden registry file)
    ours.write_text("half a trace")
    prepare_out_dir(folder, force=True)
    assert user.read_text() == "my notes"
    assert not ours.exists()
    assert not (folder / ".wheelbench-temps").exists()   # emptied and gone


def test_an_unfinished_atomic_write_is_registered_and_a_finished_one_struck(tmp_path):
    out = prepare_out_dir(tmp_path / "o")
    with atomic_path(out / "a.txt") as tmp:
        tmp.write_text("x")
        assert f"+{tmp.name}" in (out / MARKER).read_text().splitlines()
    assert f"-{tmp.name}" in (out / MARKER).read_text().splitlines()
    beside = tmp_path / "user"                        # a folder without our marker (a --video target)
    beside.mkdir()
    write_text(beside / "clip.txt", "y")
    assert sorted(p.name for p in beside.iterdir()) == ["clip.txt"]   # the registry went with its entry


def test_a_second_command_into_a_locked_folder_is_refused(tmp_path):
    import fcntl

    out = prepare_out_dir(tmp_path / "o")
    release_locks()
    fd = os.open(out / ".wheelbench-lock", os.O_RDWR)   # another process's lock: its own open file
    fcntl.flock(fd, fcntl.LOCK_EX)
    try:
        with pytest.raises(InputError, match="another wheelbench command"):
            prepare_out_dir(out)
    finally:
        os.close(fd)
    prepare_out_dir(out)                               # let go: taken
    release_locks()


@pytest.mark.skipif(os.name != "posix", reason="POSIX permissions")
def test_out_folder_that_cannot_take_files_is_refused_before_work(tmp_path):
    """Issue 13 part 6: root passes os.access checks, so the probe really creates a file."""
    ro = tmp_path / "ro"
    ro.mkdir()
    os.chmod(ro, 0o500)
    try:
        probe = ro / "p"
        try:
            probe.write_text("x")
            probe.unlink()
            pytest.skip("chmod 0500 does not stop this user (root with CAP_DAC_OVERRIDE)")
        except OSError:
            pass
        with pytest.raises(InputError, match="cannot write"):
            prepare_out_dir(ro / "sub")
    finally:
        os.chmod(ro, 0o700)


def test_disk_full_while_writing_is_one_line_and_keeps_the_old_file(tmp_path, monkeypatch):
    import errno

    from sim.core.outputs import MachineFault
    target = tmp_path / "m.json"
    target.write_text("old\n")

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")
    monkeypatch.setattr(Path, "write_text", full)
    with pytest.raises(MachineFault, match="disk is full"):
        write_text(target, "new\n")
    monkeypatch.undo()
    assert target.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.json"]


@pytest.fixture
def read_only_out(tmp_path):
    """An output folder written by wheelbench earlier (marker and a metrics.json inside) on a
    file system then made read-only: a tmpfs mounted and remounted read-only (needs root; skips
    otherwise)."""
    mnt = tmp_path / "mnt"
    mnt.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=4m", "tmpfs", str(mnt)], capture_output=True).returncode:
        pytest.skip("cannot mount a tmpfs here (not root, or no mount permission)")
    try:
        out = prepare_out_dir(mnt / "out")
        release_locks()
        (out / "metrics.json").write_text("{}\n")
        if subprocess.run(["mount", "-o", "remount,ro", str(mnt)], capture_output=True).returncode:
            pytest.skip("cannot remount the tmpfs read-only")
        yield out
    finally:
        release_locks()
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def test_read_only_out_folder_is_refused_before_simulating(read_only_out, scenario_file, capsys, monkeypatch,
                                                           tmp_path):
    """Issue 13 part 6: a folder that exists, is ours, and cannot take a file (EROFS)."""
    import sim.run.runfiles
    from sim.cli import main

    monkeypatch.setattr(sim.run.runfiles, "run_trial", lambda *a, **k: pytest.fail("simulated before the check"))
    code = main(["run", str(scenario_file), "--out", str(read_only_out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1, err
    assert "--out" in err[0] and "cannot write" in err[0] and "Read-only" in err[0]
    assert (read_only_out / "metrics.json").read_text() == "{}\n"
    clip = read_only_out / "clip.gif"                  # a clip into the read-only folder: refused as early
    code = main(["run", str(scenario_file), "--out", str(tmp_path / "fresh"), "--video", str(clip)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--video" in err[0] and "cannot write" in err[0], err
    assert not (tmp_path / "fresh").exists()


@pytest.mark.parametrize("code_, words", [(28, "disk is full"), (30, "read-only"), (13, "permission denied")])
def test_disk_faults_while_a_run_writes_are_one_line(tmp_path, scenario_file, capsys, monkeypatch, code_, words):
    """Issue 13 part 7: the disk fills (or turns read-only) while trace.csv is written: one line
    saying what to do, exit 2, and metrics.json of an earlier run is kept whole."""
    import errno

    import sim.run.runfiles
    from sim.cli import main
    assert code_ == {28: errno.ENOSPC, 30: errno.EROFS, 13: errno.EACCES}[code_]   # Linux's numbers
    out = tmp_path / "out"
    assert main(["run", str(scenario_file), "--out", str(out)]) == 0
    before = (out / "metrics.json").read_text()

    def fail(trace, path, *args, **kwargs):
        Path(path).write_text("part of a trace")
        raise OSError(code_, os.strerror(code_), str(path))
    monkeypatch.setattr(sim.run.runfiles, "write_csv", fail)
    capsys.readouterr()
    code = main(["run", str(scenario_file), "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1, err
    assert words in err[0] and "trace.csv" in err[0] and "Traceback" not in err[0]
    assert (out / "metrics.json").read_text() == before
    assert not [p.name for p in out.iterdir() if p.name.endswith(".tmp.csv")]   # the temporary went
