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
import time
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


#: Seconds between a pool worker's checks that the sweep's process still exists.
PARENT_CHECK_INTERVAL = 1.0


def _watch_parent(owner: int, parent: int) -> None:
    """End this worker when the sweep's process is gone (killed with SIGKILL: no clean-up ran)."""
    while True:
        time.sleep(PARENT_CHECK_INTERVAL)
        try:
            os.kill(owner, 0)
            owner_alive = True
        except ProcessLookupError:
            owner_alive = False
        except OSError:  # exists, owned by someone else (cannot happen for our own parent)
            owner_alive = True
        # a forked worker is reparented the moment its owner dies, before the owner is reaped
        if not owner_alive or (owner == parent and os.getppid() != parent):
            os._exit(1)


def _worker_init(owner: int | None = None):  # runs in each pool worker before any task
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is handled by the parent only
    signal.signal(signal.SIGTERM, signal.SIG_DFL)  # a forked worker must not inherit the CLI's SIGTERM handler
    for name in _SINGLE_THREAD_ENV:
        os.environ.setdefault(name, "1")
    if owner is not None:
        threading.Thread(target=_watch_parent, args=(owner, os.getppid()), daemon=True,
                         name="popdens-parent-watch").start()


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
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=_pool_context(), initializer=_worker_init,
                                   initargs=(os.getpid(),))
        procs: dict = {}
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
                    procs.update(getattr(pool, "_processes", None) or {})  # not public API; guarded
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
                                                           f"point died{_death_cause(procs)}")
                                continue
                        suspects.append(task)
                        continue
                    except Exception as exc:  # e.g. the function or its result could not be pickled
                        yield lost_record(task, 1, "".join(traceback.format_exception_only(exc)).strip())
                        continue
                    yield rec
        finally:
            _stop_pool(pool)


def _death_cause(procs: dict) -> str:
    """`` (killed by SIGKILL)``, `` (exit code 3)``...: how the pool's dead workers ended, if known."""
    causes = set()
    for p in procs.values():
        p.join(timeout=0.5)
        code = p.exitcode
        if code is None or code == 0:
            continue
        if code < 0:
            try:
                causes.add(f"killed by {signal.Signals(-code).name}")
            except ValueError:
                causes.add(f"killed by signal {-code}")
        else:
            causes.add(f"exit code {code}")
    hint = ""
    if any("SIGKILL" in c for c in causes):
        hint = "; SIGKILL often means the machine ran out of memory"
    return f" ({', '.join(sorted(causes))}{hint})" if causes else ""


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


#: Seconds a Dask sweep waits with no worker connected before it gives up (finished points are kept).
NO_WORKER_TIMEOUT = 120.0
#: Seconds between checks of the Dask cluster's workers.
WORKER_CHECK_INTERVAL = 2.0


def dask_connect(workers: int, scheduler: str | None):
    """``(client, cluster)`` for a Dask sweep, connected before anything is written.

    Every address form gets a plain ``ConnectionError`` naming the address and the cause: a scheduler
    that does not answer within CONNECT_TIMEOUT, an unknown scheme, a ``tls://`` address without a
    TLS configuration, a transport this machine lacks.
    """
    distributed = _import_distributed()
    if scheduler is None:
        cluster = distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                           host="127.0.0.1", dashboard_address=":0")
        return distributed.Client(cluster), cluster
    if not isinstance(scheduler, str) or not scheduler.strip():
        raise ConnectionError(f"`scheduler` = {scheduler!r}: expected an address such as tcp://host:8786")
    try:
        client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT)
    except Exception as exc:  # OSError (no answer), ValueError (scheme), TypeError (tls without a context)
        hint = ""
        if scheduler.startswith("tls://"):
            hint = ("; a tls:// scheduler needs certificates in the Dask configuration (distributed.comm.tls); "
                    "popdens uses the configuration as it is")
        raise ConnectionError(f"cannot reach the Dask scheduler at {scheduler!r}: {type(exc).__name__}: "
                              f"{exc}{hint}") from None
    return client, None


def run_dask(evaluate, func, tasks, retries: int, workers: int, scheduler: str | None, token: str,
             connection=None, no_worker_timeout: float = NO_WORKER_TIMEOUT):
    """Run on the Dask scheduler at ``scheduler``, or on a local Dask cluster of ``workers`` processes
    (``connection``: a ``(client, cluster)`` pair from :func:`dask_connect`, made here if None).

    Dask itself reschedules tasks whose worker is lost (up to its ``allowed-failures``
    setting); a task it finally gives up on is recorded as failed.  When no worker has been
    connected for ``no_worker_timeout`` seconds, the sweep stops with a ``ConnectionError`` saying
    so (the points finished so far are saved; ``--resume`` continues).
    """
    distributed = _import_distributed()
    client, cluster = connection if connection is not None else dask_connect(workers, scheduler)
    futures = {}
    try:
        for t in tasks:
            fut = client.submit(evaluate, func, t[0], t[1], t[2], retries, key=f"popdens-point-{token}-{t[0]}",
                                pure=False)
            futures[fut] = t
        pending = set(futures)
        alone_since = None
        while pending:
            try:
                done, pending = distributed.wait(list(pending), timeout=WORKER_CHECK_INTERVAL,
                                                 return_when="FIRST_COMPLETED")
            except TimeoutError:  # nothing finished within the interval
                done = set()
            pending = set(pending)
            for fut in done:
                task = futures[fut]
                try:
                    rec = fut.result()
                except Exception as exc:  # KilledWorker, cancelled, unpicklable result
                    rec = lost_record(task, retries + 1,
                                      "".join(traceback.format_exception_only(exc)).strip() or type(exc).__name__)
                fut.release()
                yield rec
            if done:
                alone_since = None
                continue
            n_workers = len(client.scheduler_info().get("workers", {}))
            if n_workers:
                alone_since = None
            elif alone_since is None:
                alone_since = time.monotonic()
            elif time.monotonic() - alone_since > no_worker_timeout:
                raise ConnectionError(f"no Dask worker has been connected to the scheduler for "
                                      f"{no_worker_timeout:g} s; {len(pending)} point(s) not computed (the "
                                      "finished ones are saved: start workers and resume)")
    finally:
        try:
            client.cancel(list(futures))
        except Exception:  # pragma: no cover - best effort while shutting down
            pass
        client.close()
        if cluster is not None:
            cluster.close()
