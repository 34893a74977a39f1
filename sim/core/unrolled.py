"""Hot-loop code written out for one configuration (a device's number of wheels, a sensor set-up).

A per-step loop over one to three wheels or axes in Python pays more for the zip, the unpacking,
the calls and the flags than for its arithmetic. Where a measured hot path needs it, its module
keeps a template of the code for one wheel or axis and writes the code out once per trial for the
configuration at hand, with every constant bound by name: the same operations in the same order
as the loop it stands for, so the same doubles (each such module's tests pin it to a plain path).
"""

from __future__ import annotations

import linecache
import zlib


def unrolled(source: str, names: dict, what: str) -> dict:
    """`source` (our own template's output) run in the namespace `names`, which it returns with the
    functions it defined; its lines are kept for tracebacks under a name saying `what` (and the
    source's checksum: one entry per distinct text, however many trials write it out)."""
    filename = f"<unrolled: {what}, {zlib.crc32(source.encode()):08x}>"
    linecache.cache[filename] = (len(source), None, source.splitlines(True), filename)
    exec(compile(source, filename, "exec"), names)      # noqa: S102 - our own template and constants
    return names
