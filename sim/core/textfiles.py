"""Reading a user's text file safely: a size cap, UTF-8, and one-line errors naming the file."""

from __future__ import annotations

from pathlib import Path

from .errors import InputError


def read_text_file(path: Path, *, max_bytes: int, what: str, error: type[InputError] = InputError,
                   encoding: str = "utf-8") -> str:
    """The text of `path`. Raises `error` naming the file when it is missing, not a file, larger
    than `max_bytes` ("... too large for `what`") or not valid text in `encoding`."""
    _check_file(path, max_bytes=max_bytes, what=what, error=error)
    try:
        return path.read_text(encoding=encoding)
    except (OSError, UnicodeDecodeError) as exc:
        raise error(f"{path}: cannot read as UTF-8 text ({exc})") from None


def open_text_file(path: Path, *, max_bytes: int, what: str, error: type[InputError] = InputError,
                   encoding: str = "utf-8"):
    """`path` opened for reading text line by line (CSV-ready: `newline=""`), after the same
    checks as `read_text_file`. Decoding errors surface while reading (UnicodeDecodeError)."""
    _check_file(path, max_bytes=max_bytes, what=what, error=error)
    try:
        return open(path, encoding=encoding, newline="")
    except OSError as exc:
        raise error(f"{path}: cannot read ({exc.strerror or exc})") from None


def _check_file(path: Path, *, max_bytes: int, what: str, error: type[InputError]) -> None:
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise error(f"{path}: cannot read ({exc.strerror or exc})") from None
    if not path.is_file():
        raise error(f"{path}: not a file")
    if size > max_bytes:
        raise error(f"{path}: {size} bytes is too large for {what} (limit {max_bytes})")
