"""Plug-in fixtures for tests/test_isolation.py: strategies that misbehave inside compiled code.

Each holds the motor at 0 V until `after_s` (the same law as simple_laws.RaisesLater, so traces can be
compared row for row), then does something no Python-level timer can stop. Linux/glibc (ctypes).
"""

import ctypes
import faulthandler
import os

from sim.strategies import Reading, Strategy, StrategyParams


def deadlock() -> None:
    """Lock a fresh default (non-recursive) pthread mutex twice: the second call waits in the kernel
    for ever, and a signal handler does not end the wait (POSIX: pthread_mutex_lock never returns
    EINTR), so the trial's SIGALRM cannot reach Python code again."""
    libc = ctypes.CDLL(None)
    mutex = ctypes.create_string_buffer(64)     # zeroed: PTHREAD_MUTEX_INITIALIZER on glibc
    libc.pthread_mutex_lock(mutex)
    libc.pthread_mutex_lock(mutex)


class Misbehaves(Strategy):
    """0 V until `after_s`, then `misbehave()`."""

    class Params(StrategyParams):
        after_s: float = 0.02

    def decide(self, reading: Reading) -> float:
        if reading.t_s >= self.params.after_s:
            self.misbehave()
        return 0.0

    def misbehave(self) -> None:  # pragma: no cover - each subclass has its own
        raise NotImplementedError


class Deadlocks(Misbehaves):
    """Deadlocks in C at `after_s`, or while being built with `in_build`. With `pid_file`, writes its
    process id there first (to check that no process is left behind)."""

    class Params(Misbehaves.Params):
        in_build: bool = False
        pid_file: str | None = None

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        if self.params.pid_file:
            with open(self.params.pid_file, "w", encoding="utf-8") as fh:
                fh.write(str(os.getpid()))
        if self.params.in_build:
            deadlock()

    def misbehave(self) -> None:
        deadlock()


class Segfaults(Misbehaves):
    """Reads address 0 through ctypes at `after_s`: SIGSEGV."""

    def misbehave(self) -> None:
        faulthandler.disable()      # pytest turns it on; its crash report would only add noise
        ctypes.string_at(0)


class ExitsProcess(Misbehaves):
    """Ends its process with os._exit(3) (no exception, no clean-up) at `after_s`."""

    def misbehave(self) -> None:
        os._exit(3)
