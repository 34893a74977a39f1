"""One line about an exception raised by plug-in code, never raising itself: for the strategy
registry, the trial runner and the forked child alike."""

from __future__ import annotations


def describe_exception(exc: BaseException, *, limit: int = 300) -> str:
    """'Type: text' for an exception raised by plug-in code (see `exception_parts`)."""
    name, text = exception_parts(exc, limit=limit)
    return f"{name}: {text}" if text else name


def exception_parts(exc: BaseException, *, limit: int = 300) -> tuple[str, str]:
    """(type name, message) of an exception raised by plug-in code, never raising itself: the
    message is cut to `limit` characters, and one whose __str__ raises is named as such."""
    try:
        name = type(exc).__name__
        name = str.__str__(name) if isinstance(name, str) else "exception"
    except BaseException:  # noqa: B036
        name = "exception"
    try:
        text = str(exc)
        text = str.__str__(text).strip()
    except BaseException as inner:  # noqa: B036 - a hostile __str__ (or a timeout inside it)
        return name, f"(its message could not be read: __str__ raised {type(inner).__name__})"
    if len(text) > limit:
        text = text[:limit] + "..."
    return name, text
