"""Process isolation for plug-in strategies: one trial in a forked child, this process its watchdog.

Why. The trial's strategy clock (`sim.core.budget.StrategyClock`) can interrupt Python bytecode only. A
plug-in stuck in compiled code (a C extension that loops, a blocking ctypes call, a deadlock) cannot
be interrupted, and one that crashes (a segfault) takes its process with it. So `sim.run.trial.run_trial`
runs a plug-in's trial through `run_in_child`, and this process stays in charge of the outcome.

What is shared. Memory the child writes after the fork is its own, except for two MAP_SHARED
mappings made before it: the trial's trace columns (`sim.run.trace.Trace(shared=True)`), so the rows the
child writes are this process's rows, and a `Heartbeat` (a few float64 slots and the phase names)
saying which step the child's trial has reached and until when its current strategy call may run.

What is sent. When its work is done, the child pickles what the work returned (or the exception it
raised), plus the attributes of a `mirror` object such as an `on_step` hook, into a pipe, and leaves
with os._exit (no atexit handlers, no second flush of the parent's buffers).

The watchdog. The parent waits on the pipe, waking every WATCH_PERIOD_S to read the heartbeat. A
child that has been inside one strategy call past its deadline (the budget it had left plus GRACE_S:
the child's own SIGALRM gets the first chance to end the call cleanly) is killed with SIGKILL. A
child that ends without sending (a signal, os._exit) is reported too: `run_in_child` returns how.

No orphans. The child asks Linux to kill it when its parent dies (`die_with_parent`,
PR_SET_PDEATHSIG: covers a parent killed by SIGKILL or SIGTERM), and a parent interrupted while it
waits (KeyboardInterrupt, any exception) kills and reaps the child before the exception goes on.
The child ignores SIGINT: Ctrl-C reaches the whole process group, and the parent decides.
"""

from __future__ import annotations

import gc
import json
import mmap
import os
import pickle
import select
import signal
import sys
import time
import traceback
import types
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

AVAILABLE = hasattr(os, "fork") and hasattr(select, "poll")
"""Whether this platform can isolate trials (POSIX: fork and poll)."""

GRACE_S = 2.0
"""Time, s, a strategy call may run past its remaining budget before the parent kills the child."""

WATCH_PERIOD_S = 0.1
"""How often, s, the waiting parent reads the heartbeat (the delay before a stuck child is killed)."""


class Heartbeat:
    """Where the child is, for the parent's watchdog: float64 slots in an anonymous MAP_SHARED mapping
    made before the fork (an aligned 8-byte store is seen whole by the other process).

    Slots: `step`, the physics step of the latest strategy call (-1 while the strategy is built);
    `deadline`, the time.perf_counter() value (s) after which the current call counts as stuck, 0
    outside strategy code (perf_counter is CLOCK_MONOTONIC on Linux: one clock for both processes);
    `saturated`, the strategy's saturated ticks so far. After the slots, the trace's phase names as
    JSON (up to PHASE_BYTES). Saturated ticks and phases are what the parent still needs from the
    strategy's side when it has to report a lost child; it reads them only once the child is gone.
    """

    STEP, DEADLINE, SATURATED, PHASE_COUNT, PHASE_LENGTH = range(5)
    PHASE_BYTES = 4096

    def __init__(self) -> None:
        head = 8 * 5
        self._map = mmap.mmap(-1, head + self.PHASE_BYTES)     # anonymous; MAP_SHARED is the default on POSIX
        self.slots = memoryview(self._map)[:head].cast("d")
        self._text = memoryview(self._map)[head:]
        self.slots[self.STEP] = -1.0

    def entered(self, step: int, deadline: float) -> None:
        """The child enters strategy code at `step`, to leave by `deadline` (perf_counter, s)."""
        self.slots[self.STEP] = step            # before the deadline: the parent reads the deadline first
        self.slots[self.DEADLINE] = deadline

    def left(self, saturated: int) -> None:
        """The child left strategy code, with `saturated` saturated ticks so far."""
        self.slots[self.DEADLINE] = 0.0
        self.slots[self.SATURATED] = saturated

    def publish_phases(self, phases: list[str]) -> None:
        """The trace's phase names so far (as many as fit; the parent names the others by number)."""
        # the longest leading run of names that fits, in one pass (a trace holds at most a few
        # hundred names: sim.run.trace.MAX_PHASES)
        pieces, size = [], 2
        for name in phases:
            piece = json.dumps(name)
            if size + len(piece.encode()) + (2 if pieces else 0) > self.PHASE_BYTES:
                break
            pieces.append(piece)
            size += len(piece.encode()) + (2 if len(pieces) > 1 else 0)
        data = ("[" + ", ".join(pieces) + "]").encode()
        self._text[: len(data)] = data
        self.slots[self.PHASE_LENGTH], self.slots[self.PHASE_COUNT] = len(data), len(phases)

    def phases(self) -> list[str]:
        length, count = int(self.slots[self.PHASE_LENGTH]), int(self.slots[self.PHASE_COUNT])
        names = json.loads(bytes(self._text[:length])) if length else []
        return names + [f"phase {i}" for i in range(len(names), count)]


@dataclass(frozen=True)
class LostChild:
    """A child that sent nothing back: killed by the watchdog (`stuck`), or dead on its own (`how`,
    e.g. "signal 11, SIGSEGV" or "exit status 3"). `step`, `saturated` and `phases` are the
    heartbeat's last values; `wall_s` is the time from the fork to the end, s."""

    stuck: bool
    how: str
    step: int
    saturated: int
    phases: list[str]
    wall_s: float


def run_in_child(work: Callable[[], Any], *, beat: Heartbeat, mirror: object = None) -> tuple[Any, LostChild | None]:
    """Run `work()` in a forked child; returns (what it returned, None) or (None, LostChild).

    An exception `work` raises is raised here again (its type, arguments and attributes, with the
    child's traceback as a note). `mirror`'s attributes, as the child left them, are copied onto this
    process's `mirror` (an `on_step` hook that records what it saw keeps its record). Everything
    `work` returns must pickle, and so must everything the parent needs: the child's memory is gone.
    """
    read_fd, write_fd = os.pipe()
    started = time.perf_counter()

    def in_child() -> None:
        os.close(read_fd)
        _send(work, write_fd, mirror)

    child = fork_child(in_child)
    os.close(write_fd)
    try:
        message, lost = _watch(child, read_fd, beat, started)
    finally:
        child.kill()                                    # only if still running: an interrupt, a bug
        os.close(read_fd)
    if lost is not None:
        return None, lost
    if mirror is not None and hasattr(mirror, "__dict__"):
        vars(mirror).update(unpack_attributes(message["mirror"]))
    if "raised" in message:
        raise _unpack_exception(message["raised"])
    return message["value"], None


# ----------------------------------------------------------------------------- the child's side

def fork_child(work: Callable[[], None]) -> "Child":
    """Run `work()` in a forked child and return at once with its `Child`.

    The child ignores SIGINT (Ctrl-C reaches the whole process group; the parent decides), dies
    with its parent (PR_SET_PDEATHSIG), and leaves with os._exit: status 0 when `work` returned,
    1 with the traceback on stderr when it raised. Pending output is flushed before the fork, so
    the child does not write the parent's text again.
    """
    for stream in (sys.stdout, sys.stderr):
        _flush(stream)
    parent = os.getpid()
    # The parent's objects are frozen for the fork, as Python's gc documentation advises before a
    # fork without exec: the child's collections skip them instead of walking every object the
    # parent made (and copying every page they lie on, by writing to their headers).
    freeze = gc.get_freeze_count() == 0      # a caller's own frozen objects stay frozen
    if freeze:
        gc.freeze()
    try:
        pid = os.fork()
    finally:
        if freeze and os.getpid() == parent:
            gc.unfreeze()
    if pid:
        return Child(pid)
    code = 0
    try:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        die_with_parent()
        if os.getppid() != parent:              # the parent died before the request took hold
            os._exit(1)
        work()
        for stream in (sys.stdout, sys.stderr):
            _flush(stream)
    except BaseException:
        code = 1
        traceback.print_exc()
        _flush(sys.stderr)
    finally:
        os._exit(code)


def _send(work, write_fd: int, mirror) -> None:
    """In the child: run `work` and send what it returned, or raised, with `mirror`'s attributes."""
    try:
        message = {"value": work()}
    except BaseException as exc:                # the parent raises it again
        message = {"raised": _pack_exception(exc)}
    message["mirror"] = pack_attributes(mirror)
    try:
        data = pickle.dumps(message, protocol=pickle.HIGHEST_PROTOCOL)
    except Exception as exc:                    # what `work` returned does not pickle: a programming error
        data = pickle.dumps({"raised": _pack_exception(exc), "mirror": {}}, protocol=pickle.HIGHEST_PROTOCOL)
    with os.fdopen(write_fd, "wb") as pipe:
        pipe.write(len(data).to_bytes(8, "little") + data)


def _flush(stream) -> None:
    try:
        stream.flush()
    except (OSError, ValueError, AttributeError):   # closed or replaced by something without flush
        pass


# ----------------------------------------------------------------------------- the parent's side

class Child:
    """A forked child's pid, reaped exactly once (a reaped pid may belong to another process later)."""

    def __init__(self, pid: int) -> None:
        self.pid, self.status = pid, None

    def ended(self) -> bool:
        """Reap the child if it has ended (never blocks)."""
        if self.status is None:
            pid, status = os.waitpid(self.pid, os.WNOHANG)
            if pid:
                self.status = status
        return self.status is not None

    def wait(self) -> int:
        if self.status is None:
            self.status = os.waitpid(self.pid, 0)[1]
        return self.status

    def kill(self) -> None:
        if self.status is None:
            try:
                os.kill(self.pid, signal.SIGKILL)
            except ProcessLookupError:          # a zombie already: waitpid still reaps it
                pass
            self.wait()


def _watch(child: Child, read_fd: int, beat: Heartbeat, started: float) -> tuple[dict | None, LostChild | None]:
    """Read the child's message, killing it when stuck: (message, None) or (None, LostChild)."""
    poller = select.poll()
    poller.register(read_fd, select.POLLIN)
    buffer = bytearray()
    while True:
        if poller.poll(WATCH_PERIOD_S * 1000):
            chunk = os.read(read_fd, 1 << 20)
            buffer += chunk
            if len(buffer) >= 8 and len(buffer) >= 8 + int.from_bytes(buffer[:8], "little"):
                child.wait()
                return pickle.loads(bytes(buffer[8:])), None
            if not chunk:                       # end of file without a whole message: it died
                return None, _lost(child, beat, started, stuck=False)
        elif child.ended() and not poller.poll(0):
            # ended with nothing left to read, the pipe kept open by a process the plug-in started
            return None, _lost(child, beat, started, stuck=False)
        deadline = beat.slots[Heartbeat.DEADLINE]
        if deadline and time.perf_counter() > deadline:
            child.kill()
            return None, _lost(child, beat, started, stuck=True)


def _lost(child: Child, beat: Heartbeat, started: float, *, stuck: bool) -> LostChild:
    how = _how_it_ended(child.wait())
    return LostChild(stuck=stuck, how=how, step=int(beat.slots[Heartbeat.STEP]),
                     saturated=int(beat.slots[Heartbeat.SATURATED]), phases=beat.phases(),
                     wall_s=time.perf_counter() - started)


def _how_it_ended(status: int) -> str:
    """"exit status 3" or "signal 11, SIGSEGV" for a wait status."""
    code = os.waitstatus_to_exitcode(status)
    if code >= 0:
        return f"exit status {code}"
    try:
        return f"signal {-code}, {signal.Signals(-code).name}"
    except ValueError:
        return f"signal {-code}"


def probe_in_child(work: Callable[[], str | None], *, timeout_s: float) -> tuple[str, str]:
    """Try `work()` in a forked child first, its output silenced: ("ok", "") when it returned None,
    ("failed", text) when it returned a text (what went wrong), ("ended", how) when the child ended
    without a word (os._exit, a signal), ("stuck", "") when it had not finished after `timeout_s`
    (then it is killed). Loading a plug-in goes through here before it runs in this process, so
    that a plug-in that ends its process at import cannot end this one.
    """
    read_fd, write_fd = os.pipe()

    def in_child() -> None:
        os.close(read_fd)
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, 1)
        os.dup2(null, 2)
        sys.stdout = sys.stderr = open(null, "w", closefd=False)   # even where they were not fds 1, 2
        text = work()
        os.write(write_fd, b"ok" if text is None else b"failed" + text.encode("utf-8", "replace")[:8192])
        os.close(write_fd)

    child = fork_child(in_child)
    os.close(write_fd)
    try:
        data = _read_until_end(child, read_fd, time.perf_counter() + timeout_s)
    finally:
        child.kill()
        os.close(read_fd)
    if data is None:
        return "stuck", ""
    if data == b"ok":
        return "ok", ""
    if data.startswith(b"failed"):
        return "failed", data[6:].decode("utf-8", "replace")
    return "ended", _how_it_ended(child.wait())


def _read_until_end(child: Child, read_fd: int, deadline: float) -> bytes | None:
    """What the child writes until it ends (None if it has not by `deadline`, perf_counter s)."""
    poller = select.poll()
    poller.register(read_fd, select.POLLIN)
    data = b""
    while True:
        left = deadline - time.perf_counter()
        if left <= 0:
            return None
        if poller.poll(min(left, WATCH_PERIOD_S) * 1000):
            chunk = os.read(read_fd, 1 << 16)
            if not chunk:
                return data
            data += chunk
        elif child.ended():         # ended, the pipe kept open by a process the plug-in started
            return data


# ----------------------------------------------------------------------------- what crosses the pipe

def pack_attributes(obj: object, *, skip: tuple[str, ...] = ()) -> dict[str, bytes]:
    """`obj`'s instance attributes, each pickled on its own; those that do not pickle are left out."""
    packed = {}
    for name, value in (list(vars(obj).items()) if hasattr(obj, "__dict__") else ()):
        if name in skip:
            continue
        try:
            packed[name] = pickle.dumps(value, protocol=pickle.HIGHEST_PROTOCOL)
        except BaseException:  # noqa: B036 - a plug-in's __reduce__ is its code: even sys.exit is left out
            pass
    return packed


def unpack_attributes(packed: dict[str, bytes]) -> dict[str, Any]:
    """The attributes of `pack_attributes`; one that does not load here (its class exists only in the
    child) is left out rather than failing the others."""
    out = {}
    for name, data in packed.items():
        try:
            out[name] = pickle.loads(data)
        except (Exception, SystemExit):     # a plug-in object's __setstate__ runs here: not our exit
            pass
    return out


class StrategyRecord(types.SimpleNamespace):
    """A picklable stand-in for a strategy that ran in a child process, as `TrialResult.strategy`.

    It holds the class's `kind`, `goal` and `swings_up` and every instance attribute that pickled
    (`params`, `extra_metrics`, `saturated_ticks`, a plug-in's own counters...), as they were when the
    trial ended; the strategy's methods are not there.
    """


CLASS_FIELDS = ("kind", "goal", "swings_up")


def pack_strategy(strategy) -> dict[str, bytes] | None:
    """In the child: the strategy's fields for `unpack_strategy` (None for no strategy). The device
    is left out: the parent has its own."""
    if strategy is None:
        return None
    fields = {name: getattr(type(strategy), name, None) for name in CLASS_FIELDS}
    packed = pack_attributes(types.SimpleNamespace(**fields))
    packed.update(pack_attributes(strategy, skip=("device",)))
    return packed


def unpack_strategy(packed: dict[str, bytes] | None, *, device) -> StrategyRecord | None:
    """In the parent: the StrategyRecord of `pack_strategy`'s fields, with this process's `device`."""
    return None if packed is None else StrategyRecord(device=device, **unpack_attributes(packed))


def record_from_spec(spec, *, device, saturated_ticks: int) -> StrategyRecord:
    """A StrategyRecord when the child was lost: what the scenario says, without the trial's figures."""
    fields = {name: getattr(spec.cls, name, None) for name in CLASS_FIELDS}
    return StrategyRecord(device=device, params=spec.params, saturated_ticks=saturated_ticks,
                          extra_metrics=None, **fields)


def _pack_exception(exc: BaseException) -> tuple[bytes | None, str, str]:
    """(type, args and attributes pickled, or None when they do not pickle; a one-line summary; the
    child's traceback). Rebuilt without calling __init__: an exception whose __init__ takes other
    arguments than its args (sim.studies.verdicts' early stop) would not survive plain pickling."""
    from .exception_text import describe_exception
    try:
        text = "".join(traceback.format_exception(type(exc), exc, exc.__traceback__))
    except BaseException:  # noqa: B036 - an exception that cannot even be formatted
        text = describe_exception(exc)
    try:
        state = pickle.dumps((type(exc), exc.args, dict(vars(exc))), protocol=pickle.HIGHEST_PROTOCOL)
    except BaseException:  # noqa: B036
        state = None
    return state, describe_exception(exc), text


def _unpack_exception(packed: tuple[bytes | None, str, str]) -> BaseException:
    state, summary, text = packed
    try:
        cls, args, attributes = pickle.loads(state)
        exc = cls.__new__(cls)
        exc.args = args
        vars(exc).update(attributes)
    except Exception:
        exc = RuntimeError(f"{summary} (raised in the trial's child process; not passed back as itself)")
    if hasattr(exc, "add_note"):
        exc.add_note("raised in the trial's child process:\n" + text.rstrip())
    return exc


def die_with_parent() -> None:
    """In a worker: ask Linux to end this process when its parent dies (a killed sweep leaves no orphans)."""
    try:
        import ctypes
        import signal
        ctypes.CDLL("libc.so.6", use_errno=True).prctl(1, int(signal.SIGKILL))   # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # not Linux: orphans then finish their task and wait
        pass
