"""forkpool: tasks in forked copies give the results of running them here, in order, even when
a copy fails or dies."""

from __future__ import annotations

import os
import time

import pytest

from lapbalance import forkpool


@pytest.fixture(autouse=True)
def _fork_possible():
    # checked when each test runs: a test earlier in the session may have started numba's
    # thread pool (a parallel kernel), after which this process must not fork
    if not forkpool.can_fork():
        pytest.skip("fork is not safe in this process (not Linux, or numba's threads run)")


def _square(i, pause=0.0):
    def run():
        time.sleep(pause)
        return i * i, os.getpid()
    return run


def test_results_come_back_in_order_and_copies_share_the_work():
    tasks = [_square(i, pause=0.02) for i in range(40)]
    out = forkpool.run(tasks, processes=3)
    assert [v for v, _ in out] == [i * i for i in range(40)]
    # every task ran once, in one of the three processes, and the copies took part
    pids = {pid for _, pid in out}
    assert os.getpid() in pids and 2 <= len(pids) <= 3


def test_one_process_runs_everything_here_in_order():
    seen = []

    def task(i):
        def run():
            seen.append(i)
            return os.getpid()
        return run

    out = forkpool.run([task(i) for i in range(5)], processes=1)
    assert out == [os.getpid()] * 5 and seen == [0, 1, 2, 3, 4]
    assert forkpool.run([], processes=2) == []


def test_a_task_that_kills_its_copy_is_run_again_here():
    parent = os.getpid()

    def dies_in_a_copy():
        if os.getpid() != parent:
            os._exit(3)
        return "ran here"

    tasks = [dies_in_a_copy] + [_square(i) for i in range(1, 12)]
    out = forkpool.run(tasks, processes=2)
    assert out[0] == "ran here"
    assert [v for v, _ in out[1:]] == [i * i for i in range(1, 12)]


def test_an_error_is_raised_here_as_without_copies():
    def fails():
        raise ValueError("bad figure")

    tasks = [_square(i) for i in range(6)] + [fails] + [_square(i) for i in range(6)]
    with pytest.raises(ValueError, match="bad figure"):
        forkpool.run(tasks, processes=2)


def test_default_processes_follow_cores_and_task_count():
    assert forkpool.default_processes(1) == 1
    assert 1 <= forkpool.default_processes(100) <= min(forkpool.cores(), forkpool.MAX_PROCESSES)
    assert forkpool.default_processes(4, min_per_process=2) <= 2


def test_no_copies_once_numba_threads_started(monkeypatch):
    class _Started:
        _is_initialized = True

    monkeypatch.setitem(__import__("sys").modules, "numba.np.ufunc.parallel", _Started)
    assert not forkpool.can_fork()
    out = forkpool.run([_square(i) for i in range(6)], processes=3)
    assert {pid for _, pid in out} == {os.getpid()}  # all ran here
    assert [v for v, _ in out] == [i * i for i in range(6)]
