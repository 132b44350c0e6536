"""Running the per-gauge work in parallel: local processes, or a Dask distributed cluster.

The work for one gauge is independent of every other gauge, so gauge groups go to workers and
the results come back in the gauges' order. Each gauge's computation is the same function in
every mode, so serial, local-parallel and cluster runs give identical numbers.
"""

from __future__ import annotations

import os
import shutil
import sys

#: Gauges sent to a worker at a time: large enough to cover the cost of sending, small enough
#: to keep every worker busy and the progress bar moving.
GROUP_SIZE = 32


#: Groups per worker at least, so a small run still keeps every worker busy to the end.
GROUPS_PER_WORKER = 4


def group_size(total, workers=1, scheduler=None):
    """Gauges per group for ``total`` gauges: :data:`GROUP_SIZE`, or fewer so that each worker
    gets about :data:`GROUPS_PER_WORKER` groups (a cluster counts as eight workers here)."""
    share = 8 if scheduler else max(int(workers or 1), 1)
    return max(1, min(GROUP_SIZE, -(-int(total) // (GROUPS_PER_WORKER * share))))


def groups(items, size=GROUP_SIZE):
    """Consecutive slices of ``items`` of at most ``size``."""
    items = list(items)
    return [items[i : i + size] for i in range(0, len(items), size)]


def _python_executable():
    """A Python interpreter for spawned workers (inside QGIS, sys.executable is QGIS itself)."""
    name = os.path.basename(sys.executable).lower()
    if name.startswith("python"):
        return sys.executable
    candidates = [
        getattr(sys, "_base_executable", None),
        shutil.which("python3"),
        shutil.which("python"),
    ]
    for candidate in candidates:
        if candidate and os.path.basename(candidate).lower().startswith("python"):
            return candidate
    return sys.executable


#: Data the forked workers inherit instead of receiving it (see :func:`map_groups`).
_SHARED = None


def shared():
    """The data a forked worker inherited from the process that started it."""
    return _SHARED


def forks():
    """True where workers are forked copies of this process (Linux, outside QGIS)."""
    return (
        sys.platform.startswith("linux") and "qgis" not in os.path.basename(sys.executable).lower()
    )


def process_pool(workers):
    """A pool of ``workers`` processes (forked on Linux; spawned elsewhere, with a real Python).

    Each worker dies with the process that started it (:func:`_worker_start`): a parent
    killed outright leaves no worker behind.
    """
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    if forks():
        context = multiprocessing.get_context("fork")
    else:
        context = multiprocessing.get_context("spawn")
        context.set_executable(_python_executable())
    return ProcessPoolExecutor(
        max_workers=int(workers),
        mp_context=context,
        initializer=_worker_start,
        initargs=(os.getpid(),),
    )


#: Seconds between a worker's looks at whether its parent is still there (the fallback).
PARENT_CHECK_SECONDS = 1.0
#: prctl option that sends a signal to a process when its parent ends (linux/prctl.h).
_PR_SET_PDEATHSIG = 1


def _worker_start(parent_pid):
    """Run first in every worker: die with the parent, and leave stopping to the parent.

    * Linux: the kernel sends SIGKILL when the parent ends (``prctl(PR_SET_PDEATHSIG)``,
      through ctypes from the C library already loaded).
    * Everywhere: a daemon thread looks every :data:`PARENT_CHECK_SECONDS` whether the parent
      is still there (on POSIX a worker whose parent ended is handed to another process, so
      its parent id changes; on Windows it waits on the parent's handle), and ends the worker.
    * SIGINT (Ctrl-C reaches the whole process group) and SIGTERM are the parent's to handle:
      it stops its workers itself, and a forked worker must not inherit the parent's handler
      that turns SIGTERM into an exception.
    """
    import signal
    import threading

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "SIGTERM"):
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):
            pass  # the watcher below still ends the worker
    if os.name == "posix" and os.getppid() != parent_pid:
        os._exit(1)  # the parent ended before the kernel was told
    watcher = threading.Thread(
        target=_watch_parent, args=(parent_pid,), name="parent-watcher", daemon=True
    )
    watcher.start()


def _watch_parent(parent_pid):
    """End this worker as soon as its parent is gone (the portable fallback)."""
    import time

    if os.name != "posix":
        import multiprocessing

        parent = multiprocessing.parent_process()
        if parent is None:
            return
        parent.join()  # returns when the parent's handle is signalled: it ended
        os._exit(1)
    while os.getppid() == parent_pid:
        time.sleep(PARENT_CHECK_SECONDS)
    os._exit(1)


def _stop_workers(pool):
    """End a pool's workers now (the run stopped: their groups are no longer wanted)."""
    for process in list((getattr(pool, "_processes", None) or {}).values()):
        try:
            process.terminate()
        except Exception:
            pass


def dask_client(address):
    """A client of an existing Dask distributed scheduler (``dask[distributed]`` must be installed)."""
    from .errors import InputError

    try:
        from distributed import Client
    except ImportError:
        raise InputError(
            "the Dask scheduler option needs the Python packages dask and distributed (pip install 'recharge-atlas[dask]')"
        ) from None
    try:
        return Client(address, timeout="20s")
    except (OSError, TimeoutError) as exc:
        raise InputError(f"could not reach the Dask scheduler at {address}: {exc}") from None


def map_groups(
    function,
    payloads,
    workers=1,
    scheduler=None,
    cancelled=None,
    on_done=None,
    shared_data=None,
    pack=None,
):
    """Apply ``function`` to each payload and yield the results in order.

    With ``scheduler`` (an address) the payloads go to that Dask cluster; with ``workers`` > 1
    to a local process pool; otherwise they run here. ``cancelled()`` is asked between groups;
    ``on_done(i)`` is told when group ``i`` is back.

    ``shared_data`` is data every group reads (e.g. all daily records). Forked workers inherit
    it (see :func:`shared`) and their payloads go as they are; everywhere else each payload is
    first passed through ``pack(payload, shared_data)`` to carry the part it needs.
    """
    global _SHARED
    from .errors import Cancelled

    local_fork = (
        not scheduler and workers is not None and int(workers) > 1 and len(payloads) > 1 and forks()
    )
    if shared_data is not None and pack is not None and not local_fork:
        payloads = [pack(payload, shared_data) for payload in payloads]
    _SHARED = shared_data if local_fork else None

    def check():
        if cancelled is not None and cancelled():
            raise Cancelled("run cancelled")

    if scheduler:
        client = dask_client(scheduler)
        try:
            futures = client.map(function, payloads, pure=False)
            for i, future in enumerate(futures):
                check()
                yield future.result()
                if on_done:
                    on_done(i)
        finally:
            client.close()
        return
    if workers is None or int(workers) <= 1 or len(payloads) <= 1:
        for i, payload in enumerate(payloads):
            check()
            yield function(payload)
            if on_done:
                on_done(i)
        return
    pool = process_pool(min(int(workers), len(payloads)))
    try:
        futures = [pool.submit(function, payload) for payload in payloads]
        for i, future in enumerate(futures):
            check()
            yield future.result()
            if on_done:
                on_done(i)
    except BaseException:  # stopped (Ctrl-C, SIGTERM, cancel) or failed: no waiting for groups
        _stop_workers(pool)
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
        _SHARED = None
