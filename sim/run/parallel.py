"""Running many independent simulations: in this process, on local processes, or on a dask cluster.

Every task is a picklable payload handed to a module-level function; results come back in
completion order with the task's index, so callers persist each as it arrives. At most a few
tasks per worker are in flight at once, so memory stays flat however long the task list is.
Results never depend on the worker count: each task carries its own seed.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator
from typing import Any

from ..core.errors import InputError
from ..core.isolation import die_with_parent
from ..core.options import check_workers, default_workers

IN_FLIGHT_PER_WORKER = 2


def run_tasks(fn: Callable[[Any], Any], tasks: Iterable[tuple[int, Any]], *, workers: int | None = None,
              cluster: Any = None, batch: int = 1) -> Iterator[tuple[int, Any]]:
    """Yield (index, fn(payload)) for each (index, payload) in `tasks`, in completion order.

    Parameters
    ----------
    workers : local worker processes; 1 runs in this process; None means all cores.
    cluster : a dask.distributed scheduler address (str) or Client; overrides `workers`.
    batch : payloads sent to a local worker per round trip. For tasks of a few tens of ms (catch-map
        cells) the parent's share of each round trip (pickling, queue threads, waking up) takes
        time from the workers on a 2-core machine; results still come back one per task.
    """
    # Not a generator itself: bad options and an unreachable scheduler fail here, before a caller
    # writes anything; the work starts when the returned iterator is first read.
    if cluster is not None:
        client, own = _connect(cluster)
        return _run_dask(fn, tasks, client, own)
    workers = default_workers() if workers is None else workers
    check_workers(workers)   # 1 .. 4 per core: a typo must not fork a thousand processes
    if workers == 1:
        return ((index, fn(payload)) for index, payload in tasks)
    if batch < 1:
        raise ValueError(f"batch must be at least 1, found {batch}")
    return _run_pool(fn, tasks, workers, batch)


def _warm_imports() -> None:
    """Import the heavy libraries once here, so forked workers inherit them (seconds per worker otherwise)."""
    import scipy.linalg  # noqa: F401  (scipy.signal is no longer used: the LQR design does its own ZOH)

    from ..physics.engine import import_pybullet
    import_pybullet()
    # pint's registry (about 1 s to build) is left out: common unit strings never need it, and a
    # worker that does builds it on first use


def _run_batch(fn, payloads: list) -> list:
    """In a worker: fn over a batch of payloads (module-level so it pickles by reference)."""
    return [fn(p) for p in payloads]


def _run_pool(fn, tasks, workers: int, batch: int):
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    _warm_imports()
    with ProcessPoolExecutor(max_workers=workers, initializer=die_with_parent) as pool:
        pending: dict = {}
        source = iter(tasks)
        exhausted = False
        try:
            while pending or not exhausted:
                while not exhausted and len(pending) < IN_FLIGHT_PER_WORKER * workers:
                    items = _take(source, batch)
                    if not items:
                        exhausted = True
                        break
                    pending[pool.submit(_run_batch, fn, [p for _, p in items])] = [i for i, _ in items]
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in done:
                    yield from zip(pending.pop(fut), fut.result())
        finally:
            for fut in pending:
                fut.cancel()


def _connect(cluster):
    """(client, owned): a new Client for an address (ours to close), or the caller's Client."""
    try:
        from distributed import Client
    except ImportError:
        raise InputError("--cluster needs dask.distributed: pip install 'wheelbench[cluster]'") from None
    if not isinstance(cluster, str):
        return cluster, False
    try:
        return Client(cluster, timeout="10s"), True
    except OSError as exc:
        raise InputError(f"--cluster {cluster}: cannot reach the scheduler ({exc})") from None


def _run_dask(fn, tasks, client, own: bool):
    try:
        yield from _dask_results(fn, tasks, client)
    except Exception as exc:
        if not _scheduler_lost(client, exc):
            raise   # the task's own error, with the scheduler still there
        from ..core.outputs import MachineFault
        raise MachineFault(f"--cluster {_address(client)}: lost the dask scheduler ({type(exc).__name__}: "
                           f"{str(exc).splitlines()[0][:200] if str(exc) else 'no message'}); check that it runs and "
                           "is reachable, then run the command again") from None
    finally:
        if own:
            client.close()


def _scheduler_lost(client, exc: BaseException) -> bool:
    """Did `exc` come from losing the scheduler (not from a task)? A client no longer running,
    a closed client or connection, or work cancelled under us."""
    import asyncio
    import concurrent.futures
    if getattr(client, "status", "running") != "running":
        return True
    names = {c.__name__ for c in type(exc).__mro__}
    return bool(names & {"ClosedClientError", "CommClosedError", "CancelledError", "FutureCancelledError"}) or \
        isinstance(exc, (OSError, asyncio.CancelledError, concurrent.futures.CancelledError))


def _address(client) -> str:
    try:
        return str(client.scheduler.address)
    except Exception:  # noqa: BLE001 - a closed client may have no scheduler left to name
        return "(scheduler)"


def _dask_results(fn, tasks, client):
    from distributed import as_completed
    width = max(1, sum(client.nthreads().values())) * IN_FLIGHT_PER_WORKER
    source = iter(tasks)
    index_of: dict = {}
    queue = as_completed()
    for item in _take(source, width):
        fut = client.submit(fn, item[1], pure=False)
        index_of[fut.key] = item[0]
        queue.add(fut)
    for fut in queue:
        result = fut.result()
        yield index_of.pop(fut.key), result
        fut.release()
        for item in _take(source, 1):
            nxt = client.submit(fn, item[1], pure=False)
            index_of[nxt.key] = item[0]
            queue.add(nxt)


def _take(source: Iterator, n: int) -> list:
    out = []
    for _ in range(n):
        item = next(source, None)
        if item is None:
            break
        out.append(item)
    return out


class WorkerPool:
    """Workers kept for a whole study, for callers that must decide each next task from the results
    so far (tune asks its sampler after each result): `submit(fn, payload)` returns a future-like
    object with `.result()`. Local processes (one pool, forked once), this process (workers=1), or
    a dask cluster. Use as a context manager; the options are checked as for `run_tasks`.
    """

    def __init__(self, *, workers: int | None = None, cluster: Any = None):
        self.client = self.own = self.pool = None
        if cluster is not None:
            self.client, self.own = _connect(cluster)
            self.size = max(1, sum(self.client.nthreads().values()))
            return
        self.size = default_workers() if workers is None else workers
        if self.size < 1:
            raise InputError(f"--workers: expected at least 1, found {self.size}")
        if self.size > 1:
            from concurrent.futures import ProcessPoolExecutor
            _warm_imports()
            self.pool = ProcessPoolExecutor(max_workers=self.size, initializer=die_with_parent)

    def submit(self, fn: Callable[[Any], Any], payload: Any):
        if self.client is not None:
            return self.client.submit(fn, payload, pure=False)
        if self.pool is not None:
            return self.pool.submit(fn, payload)
        return _Done(fn(payload))

    def __enter__(self) -> "WorkerPool":
        return self

    def __exit__(self, *exc) -> None:
        if self.pool is not None:
            self.pool.shutdown(wait=True, cancel_futures=True)
        if self.client is not None and self.own:
            self.client.close()


class _Done:
    """A finished result in the shape of a future (the in-process case of `WorkerPool`)."""

    def __init__(self, value: Any):
        self.value = value

    def result(self) -> Any:
        return self.value
