"""Running independent tasks here, in a local process pool or on a Dask cluster.

Both batch runs of a cohort and the chunks of a large scan are lists of
independent tasks whose results are plain files; :func:`execute` yields
results as tasks finish, whichever engine runs them.
"""

from __future__ import annotations

import contextlib
import os
import signal
import uuid

__all__ = ["execute", "usable_cores", "local_workers"]


def usable_cores():
    """Cores this process may run on (its CPU affinity where the platform tells)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        return os.cpu_count() or 1


def local_workers(workers=None):
    """Local processes for independent tasks: ``workers``, or by default one
    per usable core; 1 inside a worker process (no pools within pools)."""
    import multiprocessing
    if workers is None:
        if multiprocessing.parent_process() is not None:
            return 1
        return usable_cores()
    return max(1, int(workers))


def _die_with_parent():
    """Worker initializer: ask the kernel to kill this worker when its parent dies
    (Linux); let the parent alone handle Ctrl-C."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        import ctypes
        libc = ctypes.CDLL("libc.so.6", use_errno=True)
        libc.prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # not Linux
        pass


def execute(fn, tasks, workers=1, scheduler=None, name="skelmorph"):
    """Yield ``fn(*args)`` for every tuple ``args`` in ``tasks``, as they finish.

    Parameters
    ----------
    fn : callable
        A module-level function (it is pickled for other processes).
    tasks : list of tuple
    workers : int
        Local processes; 1 runs the tasks in this process, in order.
    scheduler : str or distributed.Client, optional
        A Dask scheduler address (``tcp://host:port``) or client; then
        ``workers`` is ignored.
    name : str
        Prefix of the Dask task keys.
    """
    if not tasks:
        return
    if scheduler is not None:
        from distributed import Client, as_completed
        client = scheduler if isinstance(scheduler, Client) else Client(scheduler)
        try:
            futures = [client.submit(fn, *args, pure=False,
                                     key=f"{name}-{i}-{uuid.uuid4().hex[:6]}")
                       for i, args in enumerate(tasks)]
            for fut in as_completed(futures):
                yield fut.result()
        finally:
            if client is not scheduler:
                client.close()
        return
    if workers <= 1:
        for args in tasks:
            yield fn(*args)
        return
    from concurrent.futures import ProcessPoolExecutor, as_completed
    pool = ProcessPoolExecutor(max_workers=int(workers), initializer=_die_with_parent)
    try:
        futures = [pool.submit(fn, *args) for args in tasks]
        for fut in as_completed(futures):
            yield fut.result()
    except BaseException:
        # Stop now: drop queued tasks and end the running ones (their
        # temporary files are cleaned by the next run).
        running = list((getattr(pool, "_processes", None) or {}).values())
        pool.shutdown(wait=False, cancel_futures=True)
        for proc in running:
            with contextlib.suppress(Exception):
                proc.kill()
        raise
    pool.shutdown(wait=True)
