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

import gc
import math
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

#: Default backend: the pool is used only when it would save at least this much wall time (s) over
#: running the remaining points here (start-up of forked workers and pickling: measured 0.05-0.3 s on
#: these machines, see ``popdens bench sweep``; doubled for safety).
POOL_START_S = 0.5
#: Work per chunk of points sent to a worker (s), and at least this many chunks per worker (load
#: balance).  A chunk's results reach the disk together, so an interrupted sweep loses at most about
#: this much finished work per worker.
CHUNK_SECONDS = 0.25
CHUNKS_PER_WORKER = 4
#: Time allowed to connect to a Dask scheduler given by address.
CONNECT_TIMEOUT = "10s"
#: Address schemes of Dask's transports (tcp is also the scheme-less form).
KNOWN_SCHEMES = ("tcp", "tls", "inproc", "ucx", "ws", "wss")

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


def _evaluate_chunk(evaluate, func, chunk, retries):  # runs in a pool worker
    return [evaluate(func, t[0], t[1], t[2], retries) for t in chunk]


def _chunk_size(n_left: int, workers: int, per_point_s: float | None) -> int:
    """Points per submission: about CHUNK_SECONDS of work, and never fewer than CHUNKS_PER_WORKER
    chunks per worker for the points left (load balance); one point while the cost is unknown."""
    if per_point_s is None:
        return 1
    most = max(1, math.ceil(n_left / (CHUNKS_PER_WORKER * workers)))
    return max(1, min(most, int(CHUNK_SECONDS / max(per_point_s, 1e-9))))


def _pool_saves_time(per_point_s: float, n_left: int, workers: int) -> bool:
    """Whether ``workers`` processes would finish ``n_left`` points of ``per_point_s`` each at least
    POOL_START_S sooner than this process alone."""
    return per_point_s * n_left * (1.0 - 1.0 / workers) >= POOL_START_S


def run_processes(evaluate, func, tasks, retries: int, workers: int, auto: bool = False, on_choice=None):
    """Local pool of ``workers`` processes, fed chunks of points.

    With ``auto`` (the default backend) points first run here, one by one:
    the first loads or compiles the kernels, which forked workers then
    inherit, and the mean CPU time of the others (CPU rather than wall time,
    so that the choice does not follow the load of a shared machine)
    estimates the work left.  As soon as the pool would save POOL_START_S
    (start-up, pickling) on the points left, they go to the pool; if it
    never would, the whole sweep runs here, with the serial backend's
    exposure: a point that kills its process ends the sweep (the points
    written so far are kept for a resume).  ``on_choice(name, per_point_s)``
    learns the decision (``"serial"`` or ``"processes"``).

    Chunks hold about CHUNK_SECONDS of work, sized from the mean time of
    the points finished so far (one point per chunk until one is known).
    At most ``workers + 1`` chunks are in flight.  When a worker process
    dies, the pool is restarted and the points of the chunks that were in
    flight run again one at a time: a point that kills the pool while
    running alone has used one attempt, and after ``retries + 1`` such
    attempts it is recorded as failed; the innocent neighbours simply
    complete.
    """
    pending = deque(tasks)
    # cost of a point (s): the first one here also loads the kernels, so it is kept apart
    first_s, spent, timed = None, 0.0, 0

    def per_point():
        return spent / timed if timed else first_s

    if auto:
        from ..model._jit import compile_seconds  # noqa: PLC0415 - the kernels' compile clock

        while pending and (timed == 0 or not _pool_saves_time(spent / timed, len(pending), workers)):
            t = pending.popleft()
            cpu0, comp0 = time.thread_time(), compile_seconds()
            rec = evaluate(func, t[0], t[1], t[2], retries)
            cost = max(time.thread_time() - cpu0 - (compile_seconds() - comp0), 0.0)
            if first_s is None:
                first_s = cost
            else:
                spent += cost
                timed += 1
            yield rec
        if not pending:
            if on_choice is not None:
                on_choice("serial", per_point())
            return
    if on_choice is not None:
        on_choice("processes", per_point())
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
                window = 1 if alone else workers + 1
                while (suspects if alone else pending) and len(futures) < window and not broken:
                    if alone:
                        chunk = suspects.popleft()
                    else:
                        size = _chunk_size(len(pending), workers, per_point())
                        chunk = [pending.popleft() for _ in range(min(size, len(pending)))]
                    try:
                        futures[pool.submit(_evaluate_chunk, evaluate, func, chunk, retries)] = chunk
                    except BrokenProcessPool:  # a worker died; restart the pool
                        if alone:
                            suspects.appendleft(chunk)
                        else:
                            pending.extendleft(reversed(chunk))
                        broken = True
                    procs.update(getattr(pool, "_processes", None) or {})  # not public API; guarded
                if not futures:
                    break
                done, _ = wait(list(futures), return_when=FIRST_COMPLETED)
                for fut in done:
                    chunk = futures.pop(fut)
                    try:
                        recs = fut.result()
                    except BrokenProcessPool:
                        broken = True
                        if alone:  # it ran by itself: this point killed its worker
                            task = chunk[0]
                            n = lost.get(task[0], 0) + 1
                            lost[task[0]] = n
                            if n > retries:
                                yield lost_record(task, n, "WorkerLost: the worker process running this "
                                                           f"point died{_death_cause(procs)}")
                                continue
                        suspects.extend([t] for t in chunk)  # run each point of the chunk again, alone
                        continue
                    except Exception as exc:  # e.g. the function or its result could not be pickled
                        why = "".join(traceback.format_exception_only(exc)).strip()
                        for task in chunk:
                            yield lost_record(task, 1, why)
                        continue
                    for rec in recs:
                        spent += rec["wall_time_s"]
                        timed += 1
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


def _host_port_ok(rest: str) -> bool:
    """``host``, ``host:port`` or ``[ipv6]:port`` with a non-empty host and a numeric port."""
    if rest.startswith("["):
        host, sep, tail = rest[1:].partition("]")
        return bool(host) and bool(sep) and (tail == "" or (tail.startswith(":") and tail[1:].isdigit()))
    if ":" not in rest:
        return bool(rest) and "/" not in rest
    host, _, port = rest.rpartition(":")
    return bool(host) and ":" not in host and port.isdigit()


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
    scheme = scheduler.split("://", 1)[0].lower() if "://" in scheduler else "tcp"
    if scheme not in KNOWN_SCHEMES:
        # refused here: distributed's own check of an unknown scheme runs in its event loop and has
        # been seen to hang instead of raising
        raise ConnectionError(f"cannot reach the Dask scheduler at {scheduler!r}: unknown address scheme "
                              f"{scheme!r} (expected one of {', '.join(s + '://' for s in KNOWN_SCHEMES)})")
    rest = scheduler.split("://", 1)[1] if "://" in scheduler else scheduler
    if scheme in ("tcp", "tls", "ws", "wss") and not _host_port_ok(rest):
        # checked here: distributed's own reaction to a malformed address differs between its versions
        raise ConnectionError(f"cannot reach the Dask scheduler at {scheduler!r}: invalid address "
                              "(expected host:port, e.g. tcp://10.0.0.5:8786)")
    failure = None
    try:
        client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT)
    except Exception as exc:  # OSError (no answer), ValueError (scheme), TypeError (tls without a context)
        hint = ""
        if scheduler.startswith("tls://"):
            hint = ("; a tls:// scheduler needs certificates in the Dask configuration (distributed.comm.tls); "
                    "popdens uses the configuration as it is")
        failure = f"cannot reach the Dask scheduler at {scheduler!r}: {type(exc).__name__}: {exc}{hint}"
    if failure is not None:
        # The half-made Client (kept alive by the exception's traceback) is closed here, with nothing else
        # of Dask starting: left to a later garbage collection, its __del__ ran inside the start-up of the
        # next cluster and deadlocked there (seen in the test suite, 1 run in ~15).  The error is raised
        # outside the except block so that it does not keep the traceback alive.
        gc.collect()
        raise ConnectionError(failure)
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
