"""Where the tasks of a job run: our own process pool, or any concurrent.futures Executor.

``run_tasks(tasks, function, finish, failure, executor, workers)`` runs a picklable top-level
``function`` on every task and hands each outcome to ``finish`` in the calling process, in the
order they end; a task that raises becomes ``failure(task, exception)``. Without an executor it
starts a spawn process pool (``local_executor``: at most the usable cores, ``worker_count``;
every worker ends when the process that made the pool dies; the pool is rebuilt
MAX_POOL_RESTARTS times when a worker process dies). ``dask_executor`` connects to a Dask
scheduler (Rocklin, "Dask: parallel computation with blocked algorithms and task scheduling",
Proc. SciPy 2015) and gives its Executor; ``check_scheduler_address`` checks the address first.
"""

from __future__ import annotations

import concurrent.futures as cf
import os
import sys
import time
from collections.abc import Callable, Sequence

from stobuilder.core.errors import InputError

MAX_POOL_RESTARTS = 2  # a local pool whose worker process died is rebuilt this often


def default_workers() -> int:
    """The cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


PARENT_POLL_SECONDS = 0.5  # how often a worker looks whether the main process of its run still lives


def worker_count(requested: int | None) -> tuple[int, str | None]:
    """The local workers for a request: the usable cores when None, else ``requested`` capped
    at the usable cores (more processes than cores only contend for them), with a note saying
    so. InputError for a count below 1."""
    cores = default_workers()
    if requested is None:
        return cores, None
    if isinstance(requested, bool) or not isinstance(requested, int) or requested < 1:
        raise InputError(f"--workers must be a whole number >= 1, got {requested!r}")
    if requested > cores:
        return cores, f"--workers {requested} is more than the {cores} usable core(s); using {cores}"
    return requested, None


def _watch_parent(parent: int) -> None:
    """Pool initializer: a daemon thread that ends this worker as soon as the process that
    started it is gone (its parent id changes: the orphan is adopted by init or a subreaper), so
    that a run killed with SIGKILL leaves no worker computing for nobody. On Linux the kernel
    is also asked to send SIGKILL on the parent's death (prctl PR_SET_PDEATHSIG; the poll covers
    the other systems and the window before the call)."""
    import threading

    if sys.platform.startswith("linux"):
        try:
            import ctypes
            import signal

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)  # PR_SET_PDEATHSIG = 1 (linux/prctl.h)
        except (OSError, AttributeError):
            pass

    def watch():
        while os.getppid() == parent:
            time.sleep(PARENT_POLL_SECONDS)
        os._exit(1)

    if os.getppid() != parent:
        os._exit(1)
    threading.Thread(target=watch, name="stobuilder-parent-watch", daemon=True).start()


def local_executor(workers: int) -> cf.Executor:
    """A process pool of ``workers`` processes (capped at the usable cores, ``worker_count``),
    started by spawn (no inherited threads or state); every worker exits when the process that
    made the pool dies (``_watch_parent``)."""
    import multiprocessing

    count, _ = worker_count(workers)
    return cf.ProcessPoolExecutor(
        max_workers=count, mp_context=multiprocessing.get_context("spawn"),
        initializer=_watch_parent, initargs=(os.getpid(),),
    )


def run_tasks(tasks: Sequence, function: Callable, finish: Callable, failure: Callable,
              executor: cf.Executor | None = None, workers: int | None = None) -> None:
    """The engine under ``run_batch`` and the bench: run ``function(task)`` for every task on
    ``executor`` (any concurrent.futures Executor, e.g. a Dask client's) or else on our own
    spawn process pool of ``workers`` processes (default: the usable cores; rebuilt when a worker
    process dies, ``_run_local``), and call ``finish(outcome)`` in this process as each one ends,
    in the order they end. A task that raises becomes ``failure(task, exception)``, which is
    finished like any outcome. ``function`` must be a picklable top-level function."""
    if not tasks:
        return
    if executor is not None:
        _run_on(executor, tasks, finish, function, failure)
    else:
        _run_local(tasks, workers or default_workers(), finish, function, failure)


def _run_on(executor: cf.Executor, tasks: Sequence, finish: Callable, function: Callable, failure: Callable) -> None:
    """Run the tasks on a caller's executor; a task that raises (a worker lost for good) is a
    failure."""
    futures = {executor.submit(function, t): t for t in tasks}
    try:
        for future in cf.as_completed(futures):
            try:
                outcome = future.result()
            except Exception as exc:
                outcome = failure(futures[future], exc)
            finish(outcome)
    except BaseException:
        for future in futures:
            future.cancel()
        raise


def _run_local(tasks: Sequence, workers: int, finish: Callable, function: Callable, failure: Callable) -> None:
    """Run the tasks on our own process pool; when a worker process dies the pool breaks, and the
    unfinished tasks go to a new pool (MAX_POOL_RESTARTS times, then they fail)."""
    from concurrent.futures.process import BrokenProcessPool

    pending = list(tasks)
    for attempt in range(MAX_POOL_RESTARTS + 1):
        broken: list = []
        pool = local_executor(min(workers, len(pending)))
        completed = False
        try:
            futures = {pool.submit(function, t): t for t in pending}
            for future in cf.as_completed(futures):
                try:
                    outcome = future.result()
                except BrokenProcessPool as exc:
                    if attempt < MAX_POOL_RESTARTS:
                        broken.append(futures[future])
                        continue
                    outcome = failure(futures[future], exc)
                except Exception as exc:
                    outcome = failure(futures[future], exc)
                finish(outcome)
            completed = True
        finally:
            # on Ctrl-C or an error, do not wait for the queued tasks
            pool.shutdown(wait=completed, cancel_futures=not completed)
        if not broken:
            return
        pending = broken


SCHEDULER_PROTOCOLS = ("tcp", "tls", "ucx", "ws", "wss", "inproc")  # distributed's comm back-ends


def check_scheduler_address(address: str) -> str:
    """``address`` when it has the form of a Dask scheduler address, ``PROTOCOL://HOST:PORT``
    (protocols of SCHEDULER_PROTOCOLS; tcp:// may be left out) with a port 1–65535; InputError
    otherwise. Checked before anything starts, and before dask is imported."""
    from urllib.parse import urlsplit

    text = address.strip() if isinstance(address, str) else ""
    problem = None
    if not text or any(c.isspace() for c in text):
        problem = "not an address"
    else:
        parts = urlsplit(text if "://" in text else "tcp://" + text)
        if parts.scheme not in SCHEDULER_PROTOCOLS:
            problem = f"unknown protocol {parts.scheme!r} (use {', '.join(p + '://' for p in SCHEDULER_PROTOCOLS)})"
        elif parts.scheme != "inproc":
            try:
                port = parts.port
            except ValueError:
                port = -1
            if not parts.hostname:
                problem = "no host"
            elif port is None or not 1 <= port <= 65535:
                problem = "no port 1-65535"
            elif parts.path not in ("", "/") or parts.query or parts.fragment:
                problem = "extra text after HOST:PORT"
    if problem:
        raise InputError(f"--scheduler {address!r}: {problem}; expected an address such as tcp://host:8786")
    return text


def dask_executor(address: str):
    """A Client connected to the Dask scheduler at ``address`` and its Executor (pure=False:
    every submission runs). Needs dask.distributed (``pip install stobuilder[cluster]``)."""
    address = check_scheduler_address(address)
    try:
        from distributed import Client
    except ImportError:
        raise InputError("--scheduler needs dask.distributed: pip install 'stobuilder[cluster]'") from None
    try:
        client = Client(address, timeout="10s")
    except (OSError, TimeoutError, ValueError, TypeError) as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise InputError(f"{address}: cannot reach the Dask scheduler ({reason})") from None
    return client, client.get_executor(pure=False)


__all__ = [
    "MAX_POOL_RESTARTS",
    "PARENT_POLL_SECONDS",
    "SCHEDULER_PROTOCOLS",
    "check_scheduler_address",
    "dask_executor",
    "default_workers",
    "local_executor",
    "run_tasks",
    "worker_count",
]
