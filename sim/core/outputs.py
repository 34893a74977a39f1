"""Writing results safely: atomic files, and output folders that never clobber a user's files.

Every file is written to a temporary name in the same folder, flushed to disk and renamed into
place, so a reader (or an interrupted run) sees either the complete file or none. Temporary names
carry the writer's process id; a run killed outright (SIGKILL, power loss) can leave one behind,
hidden (leading dot), and the next run that writes into that folder removes those of dead
processes. Only temporaries this tool can prove it made are removed: each is entered in the
folder's registry before it is created (the marker file in an output folder, a hidden
`.wheelbench-temps` file elsewhere, e.g. beside a `--video` clip), never chosen by its name
alone, so a user's `.notes.999999.keepthis.tmp` stays. An output folder is ours when it holds
our marker file; a non-empty folder without it is refused unless forced, and nothing else in it
is ever deleted. A command holds a lock on its output folder (`fcntl.flock` on a hidden lock
file) while it runs, so two commands never write into one folder at once.
"""

from __future__ import annotations

import errno
import json
import math
import os
import re
import secrets
from contextlib import contextmanager
from pathlib import Path

from .errors import InputError, WheelbenchError

MARKER = ".wheelbench-output"
MARKER_TEXT = "This folder holds wheelbench output; wheelbench may replace its own files here.\n"
TEMP_REGISTRY = ".wheelbench-temps"
"""The registry of our temporaries in a folder that has no marker (removed again when empty)."""
REGISTRY_COMPACT_BYTES = 65_536
"""A marker's registry is rewritten without its finished entries when it grows past this."""
LOCK = ".wheelbench-lock"
MAX_NAME_BYTES = 255
"""Longest file or folder name most file systems take (ext4, XFS, btrfs, APFS, NTFS: 255)."""
_LOCKS: dict[Path, int] = {}  # output folders this process holds locked: resolved path -> open fd
_FRESH: list[Path] = []  # folders this process created, deepest first (see remove_fresh_dirs)
_TEMP = re.compile(r"^\.(?P<name>.+)\.(?P<pid>\d+)\.[A-Za-z0-9_]{8}\.tmp(\.[A-Za-z0-9]+)?$")


class MachineFault(WheelbenchError):
    """The machine, not the input, stopped a command: a full disk, a read-only or forbidden
    folder, a lost cluster. The CLI prints it as one line saying what to do (exit code 2)."""


def check_out_path(path: str | Path, *, option: str = "--out") -> Path:
    """Check an output folder's name before anything is simulated: no name part over 255 bytes,
    no file where a folder must go, and an existing folder must take a new file (probed by
    creating and removing one: `os.access` says yes to root even on a read-only mount)."""
    out = Path(path)
    check_name_lengths(out, option=option)
    for parent in (out, *out.parents):
        if parent.exists():
            if not parent.is_dir():
                what = "exists and is not a folder" if parent == out else f"{parent} is a file, not a folder"
                raise InputError(f"{option} {out}: {what}")
            probe_writable(parent, option=f"{option} {out}")
            break
    return out


def check_name_lengths(path: Path, *, option: str) -> None:
    for part in path.parts:
        if len(os.fsencode(part)) > MAX_NAME_BYTES:
            raise InputError(f"{option} {str(path)[:60]}...: the name {part[:40]}... is {len(os.fsencode(part))} "
                             f"bytes long; file systems take at most {MAX_NAME_BYTES}")


def probe_writable(folder: Path, *, option: str) -> None:
    """Create and remove a probe file in `folder`; InputError naming `option` when that fails."""
    probe = folder / f".wheelbench-probe.{os.getpid()}.{secrets.token_hex(4)}"
    try:
        fd = os.open(probe, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except OSError as exc:
        raise InputError(f"{option}: cannot write in {folder} ({exc.strerror or exc}); "
                         "choose a folder you can write to") from None
    os.close(fd)
    os.unlink(probe)


def prepare_out_dir(path: str | Path, *, force: bool = False, wait: bool = False) -> Path:
    """Create `path` if needed, mark it ours and lock it for this process. Refuses a non-empty
    folder that is not ours, and a folder another command holds locked (with `wait`, waits).

    With `force`, a foreign non-empty folder is used, but nothing in it is deleted; only the
    files Wheelbench writes are replaced (and temporaries its registry proves it made).
    """
    out = check_out_path(path)
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER).exists() and not force:
        raise InputError(f"--out {out}: the folder is not empty and was not written by wheelbench "
                         "(choose another folder, or pass --force to write into it)")
    try:
        created = [p for p in (out, *out.parents) if not p.exists()]
        out.mkdir(parents=True, exist_ok=True)
        _FRESH.extend(created)
        marker = out / MARKER
        if not marker.exists():
            marker.write_text(MARKER_TEXT)
    except OSError as exc:
        raise InputError(f"--out {out}: cannot create ({exc.strerror or exc})") from None
    lock_folder(out, wait=wait)
    remove_stale_temps(out)
    return out


def lock_folder(out: Path, *, wait: bool = False) -> None:
    """Hold an exclusive lock on `out` until this process ends (or `release_locks`).

    Another process holding it: InputError, or with `wait` block until it lets go. The lock is
    `fcntl.flock` on `out/.wheelbench-lock`, so the kernel drops it when its holder dies.
    """
    try:
        import fcntl
    except ImportError:  # not POSIX: no lock
        return
    key = out.resolve()
    if key in _LOCKS:
        return
    try:
        fd = os.open(out / LOCK, os.O_RDWR | os.O_CREAT, 0o644)
    except OSError as exc:
        raise InputError(f"--out {out}: cannot create its lock file ({exc.strerror or exc})") from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
    except BlockingIOError:
        os.close(fd)
        raise InputError(f"--out {out}: another wheelbench command is writing into this folder now; wait for it "
                         "to finish (a sweep can queue behind it with --wait), or choose another folder") from None
    _LOCKS[key] = fd


def release_locks() -> None:
    """Let go of every output folder this process locked (the CLI does this when a command ends)."""
    while _LOCKS:
        _, fd = _LOCKS.popitem()
        try:
            os.close(fd)  # closing the only descriptor releases the flock
        except OSError:
            pass


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
            if set(names) <= {MARKER, LOCK} and MARKER in names:
                for name in names:
                    (path / name).unlink()
                names = []
            if not names:
                path.rmdir()
        except OSError:  # in use, or not ours to touch after all: leave it
            pass


def remove_stale_temps(out: Path) -> list[Path]:
    """Delete the temporary files of processes that no longer run that `out`'s registry proves
    we made; compact the registry. Returns the files removed. A file whose name merely looks
    like ours is never touched."""
    removed: list[Path] = []
    for reg in (Path(out) / MARKER, Path(out) / TEMP_REGISTRY):  # a folder may have been a clip's first
        if reg.exists():
            removed += _remove_registered(Path(out), reg)
    return removed


def _remove_registered(out: Path, reg: Path) -> list[Path]:
    removed: list[Path] = []
    try:
        with _registry_locked(reg) as fh:
            head, names = _read_registry(fh)
            keep = []
            for name in names:
                m = _TEMP.match(name)
                path = Path(out) / name
                if m is None or _alive(int(m.group("pid"))):
                    keep.append(name)
                    continue
                try:
                    if path.is_file() and not path.is_symlink():
                        path.unlink()
                        removed.append(path)
                except OSError:  # not ours to remove after all: leave it and its entry
                    keep.append(name)
            fh.seek(0)
            fh.truncate()
            fh.write(head + "".join(f"+{n}\n" for n in keep))
        if reg.name == TEMP_REGISTRY and not keep:
            reg.unlink()
    except OSError:  # a read-only folder, say: nothing stale can be removed, and nothing need be
        pass
    return removed


def _registry_path(folder: Path) -> Path:
    return folder / MARKER if (folder / MARKER).exists() else folder / TEMP_REGISTRY


@contextmanager
def _registry_locked(reg: Path):
    """The registry opened for reading and writing, under an exclusive flock (a run and its
    plot child may write temporaries into one folder at once)."""
    fd = os.open(reg, os.O_RDWR | os.O_CREAT, 0o644)
    with os.fdopen(fd, "r+", encoding="utf-8") as fh:
        try:
            import fcntl
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
        except ImportError:
            pass
        yield fh


def _read_registry(fh) -> tuple[str, list[str]]:
    """(the marker's own text, names of temporaries entered and not yet finished, in order)."""
    fh.seek(0)
    head, live = [], {}
    for line in fh.read().splitlines(keepends=True):
        if line.startswith("+"):
            live[line[1:].rstrip("\n")] = True
        elif line.startswith("-"):
            live.pop(line[1:].rstrip("\n"), None)
        else:
            head.append(line)
    return "".join(head), list(live)


def register_temp(folder: Path, name: str, *, done: bool = False) -> None:
    """Enter temporary `name` in `folder`'s registry before it is created (`done`: it was
    renamed or removed, strike it)."""
    reg = _registry_path(folder)
    if done and not reg.exists():
        return
    with _registry_locked(reg) as fh:
        fh.seek(0, os.SEEK_END)
        fh.write(("-" if done else "+") + name + "\n")
        if not done or (reg.name != TEMP_REGISTRY and fh.tell() < REGISTRY_COMPACT_BYTES):
            return
        head, live = _read_registry(fh)   # compact: the finished entries go
        fh.seek(0)
        fh.truncate()
        fh.write(head + "".join(f"+{n}\n" for n in live))
        if reg.name == TEMP_REGISTRY and not live:
            reg.unlink()  # nothing of ours left in a user's folder


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
    folder = path.parent
    name = f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp{path.suffix}"
    tmp = folder / name
    try:
        register_temp(folder, name)  # entered before it exists: a kill at any point leaves it provably ours
        os.close(os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))
    except OSError as exc:
        raise fault_from(exc, path) from None
    try:
        yield tmp
        _sync(tmp)
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        _strike(folder, name)
        if isinstance(exc, OSError) and fault_message(exc, path):
            raise fault_from(exc, path) from None
        raise
    _strike(folder, name)


def _strike(folder: Path, name: str) -> None:
    try:
        register_temp(folder, name, done=True)
    except OSError:  # a full disk, say: the entry stays, and the next run finds no file for it
        pass


_FAULTS = {
    errno.ENOSPC: "the disk is full; free some space (or choose another --out) and run the command again",
    errno.EDQUOT: "the disk quota is used up; free some space (or choose another --out) and run the command again",
    errno.EROFS: "the file system is read-only; choose a folder on a writable disk and run the command again",
    errno.EACCES: "permission denied; choose a folder you can write to (or fix its permissions) and run again",
    errno.EPERM: "operation not permitted; choose a folder you can write to and run the command again",
}


def fault_message(exc: OSError, path: str | Path | None = None) -> str | None:
    """One line for a fault of the machine while writing (full disk, read-only, forbidden), or
    None for other errors."""
    advice = _FAULTS.get(getattr(exc, "errno", None))
    if advice is None:
        return None
    where = path if path is not None else exc.filename
    return f"{where}: {advice}" if where else f"while writing: {advice}"


def fault_from(exc: OSError, path: str | Path | None = None) -> Exception:
    """A MachineFault for a known fault of the machine, else `exc` itself."""
    message = fault_message(exc, path)
    return MachineFault(message) if message else exc


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
