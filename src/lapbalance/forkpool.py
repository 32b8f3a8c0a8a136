"""Run independent tasks in the current process and in forked copies of it.

Used to draw the figures of a report or of ``lap --plots`` on every core: a figure takes about
0.1-0.2 s to build and render, a report has up to 20 of them, and forking a copy of the running
process costs a few milliseconds (nothing is imported again and no input is pickled: the copy
already holds the laps). Only the results travel back, through a pipe.

The tasks must not depend on each other or change shared state, and their results must be
picklable. A task is claimed by exactly one process (a shared counter under a lock), so the
processes balance the load between them; the calling process takes part. Whatever a copy has
not returned (it failed, was killed, or did not answer in time) is run again in the calling
process, so the results never depend on the copies: an error is raised there as it would be
without them.

Copies are made only where :func:`can_fork` says a fork is safe (Linux, one Python thread,
numba's thread pool not started); elsewhere every task runs in the calling process. The copies
run nothing but the tasks (figure drawing with matplotlib).
"""

from __future__ import annotations

import multiprocessing
import os
import sys
from collections.abc import Callable, Sequence

#: Longest wait [s] for a copy's results after the calling process has run out of tasks.
WAIT_S = 120.0

#: Most processes (the calling one included) that :func:`default_processes` proposes. [-]
MAX_PROCESSES = 4


def cores() -> int:
    """Cores this process may run on. [-]"""
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def can_fork() -> bool:
    """True when this process may fork copies of itself [-]: on Linux, with no other Python
    thread running and numba's thread pool not started. (GNU OpenMP, one of numba's
    threading layers, aborts a child forked after the parent used it; the lap solver starts
    that pool only for long laps on machines with many cores, see
    :func:`lapbalance.lap.solver_threads`. Other systems' fork is not safe with every GUI or
    system framework a plotting library may have loaded.) Sweep workers use the same test."""
    import threading

    if not sys.platform.startswith("linux") or "fork" not in \
            multiprocessing.get_all_start_methods():
        return False
    if threading.active_count() > 1:
        return False
    par = sys.modules.get("numba.np.ufunc.parallel")
    return par is None or getattr(par, "_is_initialized", True) is False


def default_processes(n_tasks: int, min_per_process: int = 2) -> int:
    """Processes worth using for ``n_tasks`` tasks [-]: one per core up to
    :data:`MAX_PROCESSES`, at least ``min_per_process`` tasks each, 1 where fork is missing."""
    if not can_fork():
        return 1
    return max(1, min(cores(), MAX_PROCESSES, n_tasks // max(1, min_per_process)))


def _claim(counter, lock) -> int:
    with lock:
        i = counter.value
        counter.value = i + 1
    return i


def _copy_main(tasks, counter, lock, conn) -> None:
    """In a copy: run claimed tasks until none is left, then send {index: result}."""
    done = {}
    try:
        while (i := _claim(counter, lock)) < len(tasks):
            done[i] = tasks[i]()
    except BaseException:  # noqa: BLE001 - the calling process runs this task again
        pass
    try:
        conn.send(done)
    except OSError:  # the calling process stopped waiting (it failed or was interrupted)
        pass
    finally:
        conn.close()


def run(tasks: Sequence[Callable[[], object]], processes: int | None = None) -> list:
    """Results of ``tasks`` (callables without arguments), in their order.

    Parameters
    ----------
    tasks : sequence of callable
        Independent tasks; each returns a picklable result. [-]
    processes : int, optional
        Processes to use, the calling one included (default: :func:`default_processes`);
        1 runs every task here, in order. [-]

    Returns
    -------
    list
        ``[task() for task in tasks]``. [-]
    """
    tasks = list(tasks)
    n = len(tasks)
    procs = default_processes(n) if processes is None else max(1, int(processes))
    procs = min(procs, n)
    if procs <= 1 or not can_fork():
        return [t() for t in tasks]
    ctx = multiprocessing.get_context("fork")
    counter = ctx.RawValue("l", 0)
    lock = ctx.Lock()
    copies = []
    for _ in range(procs - 1):
        recv, send = ctx.Pipe(duplex=False)
        p = ctx.Process(target=_copy_main, args=(tasks, counter, lock, send), daemon=True)
        p.start()
        send.close()
        copies.append((p, recv))
    results: dict[int, object] = {}
    try:
        while (i := _claim(counter, lock)) < n:
            results[i] = tasks[i]()
        for p, recv in copies:
            try:
                if recv.poll(WAIT_S):
                    results.update(recv.recv())
            except (EOFError, OSError):
                pass  # the copy died: its tasks run again below
    finally:
        for p, recv in copies:
            recv.close()
            p.join(timeout=1.0)
            if p.is_alive():
                p.terminate()
                p.join()
    return [results[i] if i in results else tasks[i]() for i in range(n)]
