"""Writing results safely: atomic files, and output folders that never clobber a user's files.

Every file is written to a temporary name in the same folder and renamed into place, so a
reader (or an interrupted run) sees either the complete file or none. An output folder is ours
when it holds our marker file; a non-empty folder without it is refused unless forced.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from contextlib import contextmanager
from pathlib import Path

from .errors import InputError

MARKER = ".wheelbench-output"


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
        out.mkdir(parents=True, exist_ok=True)
        marker = out / MARKER
        if not marker.exists():
            marker.write_text("This folder holds wheelbench output; wheelbench may replace its own files here.\n")
    except OSError as exc:
        raise InputError(f"--out {out}: cannot create ({exc.strerror or exc})") from None
    return out


@contextmanager
def atomic_path(path: str | Path):
    """Yield a temporary path beside `path`; on success rename it onto `path`, else remove it."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp" + path.suffix, dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def write_text(path: str | Path, text: str) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_json(path: str | Path, data) -> None:
    write_text(path, json.dumps(clean_json(data), indent=2, sort_keys=False) + "\n")


def clean_json(value):
    """JSON-safe copy: numpy scalars to Python, non-finite floats to None (strict JSON has no NaN)."""
    import numpy as np

    if isinstance(value, dict):
        return {str(k): clean_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_json(v) for v in value]
    if isinstance(value, np.ndarray):
        return [clean_json(v) for v in value.tolist()]
    if isinstance(value, (np.floating, float)):
        f = float(value)
        return f if math.isfinite(f) else None
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value
