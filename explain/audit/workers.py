"""Where the cases run: in this process, in local worker processes, or on a Dask cluster.

Each runner takes an iterator of tasks and yields ``(task, row)`` as cases finish, in any order,
with at most a few tasks in flight per worker (so memory stays flat over a long cohort).

Local workers are started with the ``spawn`` method, run torch on one thread
(``OMP_NUM_THREADS=1`` and ``torch.set_num_threads(1)``) and load the model once, when they
start. A worker that dies (killed, out of memory) breaks the pool: the pool is started again and
the cases that were in flight are run again; a case in flight at :data:`MAX_ATTEMPTS` deaths gets
a failed row.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
from collections import deque
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

from ..errors import InputError
from .task import run_task, worker_model

__all__ = ["run_here", "run_local", "run_dask", "MAX_ATTEMPTS", "default_workers"]

#: A case in flight when a worker died this many times is given up (failed row).
MAX_ATTEMPTS = 3


def default_workers():
    """The CPUs this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def run_here(tasks, *, died):
    """Run every task in this process, one after another (torch's threads left as they are)."""
    del died
    for task in tasks:
        yield task, run_task({**task, "one_thread": False})


def _start_worker(model, weights, grade_labels):
    worker_model(model, weights, grade_labels)


@contextlib.contextmanager
def _one_thread_children():
    saved = {k: os.environ.get(k) for k in ("OMP_NUM_THREADS", "MKL_NUM_THREADS")}
    os.environ.update({k: "1" for k in saved})
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def _pool(workers, model_args):
    with _one_thread_children():
        return ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                                   initializer=_start_worker, initargs=model_args)


def run_local(tasks, *, workers, model_args, died):
    """Run tasks on ``workers`` local processes; restart the pool if a worker dies.

    ``died(task, reason)`` makes the failed row of a case given up after :data:`MAX_ATTEMPTS`.
    """
    pending, inflight, attempts = deque(), {}, {}
    source = iter(tasks)
    pool = _pool(workers, model_args)
    try:
        while True:
            while len(inflight) < 2 * workers:
                task = pending.popleft() if pending else next(source, None)
                if task is None:
                    break
                inflight[pool.submit(run_task, task)] = task
            if not inflight:
                return
            done, _ = wait(inflight, return_when=FIRST_COMPLETED)
            broken = False
            for future in done:
                task = inflight.pop(future)
                try:
                    row = future.result()
                except BrokenProcessPool:
                    broken = True
                    pending.append(task)
                    continue
                yield task, row
            if broken:
                pending.extend(inflight.values())
                inflight.clear()
                pool.shutdown(wait=True, cancel_futures=True)
                for task in list(pending):
                    key = task["folder"]
                    attempts[key] = attempts.get(key, 0) + 1
                    if attempts[key] >= MAX_ATTEMPTS:
                        pending.remove(task)
                        yield task, died(task, f"the worker process died {attempts[key]} times "
                                               "while this case ran (killed, or out of memory)")
                pool = _pool(workers, model_args)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _client(address):
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - a dependency
        raise InputError("--scheduler: dask.distributed is not installed; pip install "
                         "'dask[distributed]'") from None
    try:
        return Client(address, timeout="20s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"--scheduler {address}: cannot connect ({exc}); start one with "
                         "'dask scheduler' and give its tcp:// address") from None


def run_dask(tasks, *, scheduler, in_flight=None, died):
    """Run tasks on the Dask cluster at ``scheduler`` (an address or a ``distributed.Client``).

    Dask reruns a task whose worker died (up to its ``allowed-failures``); a task it gives up
    gets a failed row through ``died``.
    """
    from distributed import as_completed

    own = isinstance(scheduler, str)
    client = _client(scheduler) if own else scheduler
    try:
        limit = in_flight or max(2, 2 * sum(client.nthreads().values()))
        source = iter(tasks)
        first = [t for _, t in zip(range(limit), source)]
        futures = {client.submit(run_task, t, pure=False): t for t in first}
        queue = as_completed(list(futures))
        for future in queue:
            task = futures.pop(future)
            try:
                row = future.result()
            except Exception as exc:  # noqa: BLE001 - the cluster gave the case up
                row = died(task, f"{type(exc).__name__}: {exc}")
            yield task, row
            nxt = next(source, None)
            if nxt is not None:
                new = client.submit(run_task, nxt, pure=False)
                futures[new] = nxt
                queue.add(new)
    finally:
        if own:
            client.close()
