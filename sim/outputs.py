"""Writing results safely: atomic files, and output folders that never clobber a user's files.

Every file is written to a temporary name in the same folder, flushed to disk and renamed into
place, so a reader (or an interrupted run) sees either the complete file or none. Temporary names
carry the writer's process id; a run killed outright (SIGKILL, power loss) can leave one behind,
hidden (leading dot), and the next run into that folder removes those of dead processes. An
output folder is ours when it holds our marker file; a non-empty folder without it is refused
unless forced, and nothing else in it is ever deleted.
"""

from __future__ import annotations

import json
import math
import os
import re
import tempfile
from contextlib import contextmanager
from pathlib import Path

from .errors import InputError

MARKER = ".wheelbench-output"
_FRESH: list[Path] = []  # folders this process created, deepest first (see remove_fresh_dirs)
_TEMP = re.compile(r"^\.(?P<name>.+)\.(?P<pid>\d+)\.[A-Za-z0-9_]{8}\.tmp(\.[A-Za-z0-9]+)?$")


def prepare_out_dir(path: str | Path, *, force: bool = False) -> Path:
    """Create `path` if needed and mark it ours. Refuses a non-empty folder that is not ours.

    With `force`, a foreign non-empty folder is used, but nothing in it is deleted; only the
    files Wheelbench writes are replaced.
    """
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise InputError(f"--out {out}: exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER).exists() and not force:
        raise InputError(f"--out {out}: the folder is not empty and was not written by wheelbench "
                         "(choose another folder, or pass --force to write into it)")
    try:
        created = [p for p in (out, *out.parents) if not p.exists()]
        out.mkdir(parents=True, exist_ok=True)
        _FRESH.extend(created)
        marker = out / MARKER
        if not marker.exists():
            marker.write_text("This folder holds wheelbench output; wheelbench may replace its own files here.\n")
    except OSError as exc:
        raise InputError(f"--out {out}: cannot create ({exc.strerror or exc})") from None
    remove_stale_temps(out)
    return out


def forget_fresh_dirs() -> None:
    """Start a new command: folders made before it are not its to remove."""
    _FRESH.clear()


def remove_fresh_dirs() -> None:
    """Remove the folders `prepare_out_dir` created in this process that hold nothing but our
    marker: a command that fails on bad input after making its --out folder leaves no trace."""
    while _FRESH:
        path = _FRESH.pop(0)  # deepest first: the order prepare_out_dir recorded them
        try:
            names = [p.name for p in path.iterdir()]
            if names == [MARKER]:
                (path / MARKER).unlink()
                names = []
            if not names:
                path.rmdir()
        except OSError:  # in use, or not ours to touch after all: leave it
            pass


def remove_stale_temps(out: Path) -> list[Path]:
    """Delete our temporary files left in `out` by processes that no longer run. Returns them."""
    removed = []
    for path in out.iterdir():
        m = _TEMP.match(path.name)
        if m and path.is_file() and not _alive(int(m.group("pid"))):
            try:
                path.unlink()
                removed.append(path)
            except OSError:  # gone already, or not ours to remove: leave it
                pass
    return removed


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError, OverflowError):  # someone else's live process, or unknown: keep
        return True
    return not _zombie(pid)


def _zombie(pid: int) -> bool:
    """True for a process that has ended but not been reaped (Linux's state Z). A child killed with
    its parent (a run's plot process) stays one until whoever adopted it reaps it, which in a
    container may be never; it runs no more and will write nothing."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:  # not Linux, or gone meanwhile
        return False
    return stat[stat.rindex(")") + 2:].startswith("Z")


@contextmanager
def atomic_path(path: str | Path):
    """Yield a temporary path beside `path`; on success flush it to disk and rename it onto
    `path` (with the usual umask permissions, not mkstemp's owner-only ones), else remove it."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{os.getpid()}.", suffix=".tmp" + path.suffix,
                               dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        _sync(tmp)
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def _sync(path: str) -> None:
    """fsync the file, so the rename never exposes a name whose data is not yet on disk."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


_UMASK: list[int] = []


def _umask() -> int:
    if not _UMASK:  # reading it means setting it: done once, early, from the writing thread
        mask = os.umask(0o022)
        os.umask(mask)
        _UMASK.append(mask)
    return _UMASK[0]


def write_text(path: str | Path, text: str) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_json(path: str | Path, data) -> None:
    write_text(path, json.dumps(clean_json(data), indent=2, sort_keys=False) + "\n")


JSON_DIGITS = 15   # significant digits kept in JSON: a double's sure digits, without binary noise


def clean_json(value):
    """JSON-safe copy: numpy scalars to Python, non-finite floats to None (strict JSON has no NaN).

    Floats keep 15 significant digits, so a time k * dt reads 0.351, not 0.35100000000000003, and
    a negative zero is written as 0.0 (a reader sees no sign where there is no value).
    """
    import numpy as np

    if isinstance(value, dict):
        return {str(k): clean_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_json(v) for v in value]
    if isinstance(value, np.ndarray):
        return [clean_json(v) for v in value.tolist()]
    if isinstance(value, (np.floating, float)):
        f = float(value)
        return float(f"{f:.{JSON_DIGITS}g}") + 0.0 if math.isfinite(f) else None
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value
