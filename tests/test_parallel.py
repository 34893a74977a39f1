"""The task runner: every task's result comes back once, under its own index, whatever the
worker count and batch size."""

from __future__ import annotations

import os

import pytest

from sim.core.errors import InputError
from sim.run.parallel import run_tasks


def square_and_pid(x: int) -> tuple[int, int]:
    return x * x, os.getpid()


@pytest.mark.parametrize("workers,batch", [(1, 1), (2, 1), (2, 3), (2, 50)])
def test_each_result_once_under_its_index(workers, batch):
    tasks = [(i, i + 100) for i in range(23)]            # 23: the last batch is a short one
    got = list(run_tasks(square_and_pid, iter(tasks), workers=workers, batch=batch))
    assert sorted(i for i, _ in got) == list(range(23))
    assert all(res[0] == (i + 100) ** 2 for i, res in got)
    pids = {res[1] for _, res in got}
    assert (os.getpid() in pids) == (workers == 1)       # one worker runs in this process


def test_bad_worker_count_and_batch_are_refused():
    with pytest.raises(InputError):
        run_tasks(square_and_pid, [], workers=0)
    with pytest.raises(ValueError):
        run_tasks(square_and_pid, [], workers=2, batch=0)
