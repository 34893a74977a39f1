"""Checks of command-line options that need no scenario: counts, addresses, labels.

Each raises InputError naming the option and what it found, in one line, before anything is
simulated. Folder and clip names are checked in `sim.core.outputs` and `sim.media.video`.
"""

from __future__ import annotations

import os
import re

from .errors import InputError

MAX_TRIALS = 100_000
"""Monte Carlo trials per check or sweep point. At a few tenths of a second a trial, 100,000
trials already take hours on one core; more is a typo, not a plan (our choice)."""
WORKERS_PER_CORE = 4
"""Local worker processes are capped at this many per usable core (each is a whole simulation
process of ~100 MB; more than a few per core only adds switching and memory)."""
CLUSTER_SCHEMES = ("tcp", "tls", "inproc", "ucx", "ws", "wss")
_HOST = re.compile(r"^(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9._-]+)$")


def check_trials(trials: int | None, *, minimum: int = 1) -> int | None:
    """`--trials`: None (the default), or a whole number from `minimum` to MAX_TRIALS."""
    if trials is not None and not minimum <= trials <= MAX_TRIALS:
        raise InputError(f"--trials {trials}: expected a whole number from {minimum} to {MAX_TRIALS:,}")
    return trials


def default_workers() -> int:
    """All cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def max_workers() -> int:
    """The largest `--workers` this machine takes: WORKERS_PER_CORE per usable core."""
    return WORKERS_PER_CORE * default_workers()


def check_workers(workers: int | None) -> int | None:
    """`--workers`: None (all cores), or from 1 to `max_workers()`."""
    if workers is not None and not 1 <= workers <= max_workers():
        raise InputError(f"--workers {workers}: expected a whole number from 1 to {max_workers()} "
                         f"({WORKERS_PER_CORE} per core on this machine)")
    return workers


def check_cluster(address: str | None) -> str | None:
    """`--cluster`: a scheduler address `[SCHEME://]HOST:PORT` (SCHEME one of CLUSTER_SCHEMES,
    default tcp; PORT 1..65535), or `inproc://...`. Checked for form only; reaching it comes later."""
    if address is None:
        return None
    text = address.strip()
    scheme, sep, rest = text.partition("://")
    if not sep:
        scheme, rest = "tcp", text
    if scheme not in CLUSTER_SCHEMES:
        raise InputError(f"--cluster {address!r}: the scheme {scheme!r} is not a scheduler's; expected HOST:PORT "
                         f"or {'/'.join(CLUSTER_SCHEMES)}://HOST:PORT, e.g. tcp://10.0.0.5:8786")
    if scheme == "inproc":
        if not rest or any(c.isspace() for c in rest):
            raise InputError(f"--cluster {address!r}: expected inproc://ADDRESS")
        return text
    host, colon, port = rest.rpartition(":")
    if not colon or not host or not _HOST.match(host) or not port.isdigit() or not 1 <= int(port) <= 65535:
        raise InputError(f"--cluster {address!r}: expected a scheduler address HOST:PORT (port 1 to 65535), "
                         "e.g. tcp://10.0.0.5:8786")
    return text


def check_labels(labels: list[str] | None) -> list[str] | None:
    """`compare --label`: given twice (one per side) or not at all."""
    if labels and len(labels) != 2:
        raise InputError(f"--label: give it twice (one per side), or not at all; found {len(labels)}")
    return labels


def check_clip_frames(duration_s: float, fps: int, *, option: str) -> None:
    """A clip of a `duration_s` trial at `fps` must hold at least one frame."""
    if round(duration_s * fps) < 1:
        raise InputError(f"{option}: the trial lasts {duration_s:g} s, too short for one frame at {fps} fps "
                         "(raise --fps or trial.duration)")
