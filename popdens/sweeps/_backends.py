"""Where sweep points run: in this process, in a local process pool, or on a Dask cluster.

Each backend is a generator ``run(tasks)`` that yields one finished record per
task, in completion order; the caller writes each record to disk as it
arrives.  A task is ``(index, params, seed_entropy)``; every worker computes
``evaluate(func, index, params, entropy, retries)`` (module-level, so it is
pickled by reference), which catches the analysis' own exceptions and retries
them.  The backends add what only they can see: a worker process that dies
(process pool) or a lost worker (Dask) costs its in-flight points one attempt,
and a point that has used up its attempts is recorded as failed.

Closing the generator (normal end, Ctrl-C, an error in the caller) stops the
workers and discards points still running: they have not been written, so a
resumed sweep computes them again.
"""

from __future__ import annotations

import multiprocessing
import os
import signal
import sys
import threading
import traceback
from collections import deque
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

__all__: list[str] = []

#: Time allowed to connect to a Dask scheduler given by address.
CONNECT_TIMEOUT = "10s"

#: Environment variables that keep numerical libraries single-threaded inside a worker (one
#: worker per core; common practice to avoid oversubscription).
_SINGLE_THREAD_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS")


def lost_record(task, attempts: int, why: str) -> dict:
    index, params, _ = task
    return {"index": index, "params": params, "status": "failed", "outputs": {}, "curves": {},
            "attempts": attempts, "error": why, "wall_time_s": 0.0, "worker": ""}


def run_serial(evaluate, func, tasks, retries: int):
    for index, params, entropy in tasks:
        yield evaluate(func, index, params, entropy, retries)


def _worker_init():  # runs in each pool worker before any task
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is handled by the parent only
    for name in _SINGLE_THREAD_ENV:
        os.environ.setdefault(name, "1")


def _pool_context():
    """How pool workers start.

    ``fork`` when this process runs a single thread (fast: workers inherit the
    imported modules and compiled kernels); otherwise ``forkserver`` with popdens
    preloaded, because forking a multi-threaded process is unsafe; ``spawn`` where
    neither exists.
    """
    methods = multiprocessing.get_all_start_methods()
    if "fork" in methods and threading.active_count() == 1 and sys.platform.startswith("linux"):
        return multiprocessing.get_context("fork")
    if "forkserver" in methods:
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["popdens"])
        return ctx
    return multiprocessing.get_context("spawn")


def run_processes(evaluate, func, tasks, retries: int, workers: int):
    """Local pool of ``workers`` processes.

    At most ``workers + 1`` points are in flight.  When a worker process dies,
    the pool is restarted and the points that were in flight run again one at
    a time: a point that kills the pool while running alone has used one
    attempt, and after ``retries + 1`` such attempts it is recorded as failed;
    the innocent neighbours simply complete.
    """
    pending = deque(tasks)
    suspects: deque = deque()
    lost: dict[int, int] = {}
    while pending or suspects:
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=_pool_context(), initializer=_worker_init)
        futures: dict = {}
        broken = False
        try:
            while (pending or suspects or futures) and not (broken and not futures):
                alone = bool(suspects)
                queue, window = (suspects, 1) if alone else (pending, workers + 1)
                while queue and len(futures) < window and not broken:
                    t = queue.popleft()
                    try:
                        futures[pool.submit(evaluate, func, t[0], t[1], t[2], retries)] = t
                    except BrokenProcessPool:  # a worker died; restart the pool
                        queue.appendleft(t)
                        broken = True
                if not futures:
                    break
                done, _ = wait(list(futures), return_when=FIRST_COMPLETED)
                for fut in done:
                    task = futures.pop(fut)
                    try:
                        rec = fut.result()
                    except BrokenProcessPool:
                        broken = True
                        if alone:  # it ran by itself: this point killed its worker
                            n = lost.get(task[0], 0) + 1
                            lost[task[0]] = n
                            if n > retries:
                                yield lost_record(task, n, "WorkerLost: the worker process running this "
                                                           "point died")
                                continue
                        suspects.append(task)
                        continue
                    except Exception as exc:  # e.g. the function or its result could not be pickled
                        yield lost_record(task, 1, "".join(traceback.format_exception_only(exc)).strip())
                        continue
                    yield rec
        finally:
            _stop_pool(pool)


def _stop_pool(pool: ProcessPoolExecutor) -> None:
    procs = list(getattr(pool, "_processes", {}).values())  # not public API; guarded
    pool.shutdown(wait=False, cancel_futures=True)
    for p in procs:
        if p.is_alive():
            p.terminate()
    for p in procs:
        p.join(timeout=5.0)


def dask_available() -> bool:
    try:
        import distributed  # noqa: F401
    except ImportError:
        return False
    return True


def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise ImportError("the Dask backend needs the optional extra: pip install 'popdens[dask]' "
                          "(dask[distributed])") from None
    return distributed


def run_dask(evaluate, func, tasks, retries: int, workers: int, scheduler: str | None, token: str):
    """Run on the Dask scheduler at ``scheduler``, or on a local Dask cluster of ``workers`` processes.

    Dask itself reschedules tasks whose worker is lost (up to its ``allowed-failures``
    setting); a task it finally gives up on is recorded as failed.
    """
    distributed = _import_distributed()
    cluster = None
    if scheduler is None:
        cluster = distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                           host="127.0.0.1", dashboard_address=":0")
        client = distributed.Client(cluster)
    else:
        try:
            client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT)
        except (OSError, TimeoutError, ValueError) as exc:
            raise ConnectionError(f"cannot reach the Dask scheduler at {scheduler!r}: {exc}") from None
    futures = {}
    try:
        for t in tasks:
            fut = client.submit(evaluate, func, t[0], t[1], t[2], retries, key=f"popdens-point-{token}-{t[0]}",
                                pure=False)
            futures[fut] = t
        for fut in distributed.as_completed(list(futures)):
            task = futures[fut]
            try:
                rec = fut.result()
            except Exception as exc:  # KilledWorker, cancelled, unpicklable result
                rec = lost_record(task, retries + 1,
                                  "".join(traceback.format_exception_only(exc)).strip() or type(exc).__name__)
            fut.release()
            yield rec
    finally:
        try:
            client.cancel(list(futures))
        except Exception:  # pragma: no cover - best effort while shutting down
            pass
        client.close()
        if cluster is not None:
            cluster.close()
