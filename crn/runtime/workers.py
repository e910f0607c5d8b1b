"""Local worker processes that stop when the command stops.

A pool from :func:`process_pool` has workers that ignore Ctrl-C and SIGTERM
(the main process decides what happens: see :mod:`crn.runtime.interrupts`) and die
with the main process even when it is killed outright (Linux parent-death
signal). When the block is left by an exception - an interruption included -
the workers are killed at once instead of finishing their queued tasks, and
reaped, so no worker outlives the command.
"""

from __future__ import annotations

import contextlib
import signal
import sys
import time
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from collections.abc import Iterator
    from concurrent.futures import ProcessPoolExecutor

__all__ = ["process_pool", "worker_initializer", "stop_workers"]

_PR_SET_PDEATHSIG = 1


def worker_initializer() -> None:
    """Run in each worker: ignore SIGINT/SIGTERM, die with the parent (Linux)."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    if sys.platform.startswith("linux"):
        import ctypes
        import os

        with contextlib.suppress(OSError, AttributeError):
            ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
        if os.getppid() == 1:  # the parent died before the line above took effect
            os._exit(1)


@contextlib.contextmanager
def process_pool(workers: int, context: str | None = "spawn") -> Iterator[ProcessPoolExecutor]:
    """A ``ProcessPoolExecutor`` whose workers are killed when the block raises.

    Parameters
    ----------
    workers : int
        Worker processes.
    context : str or None, default "spawn"
        multiprocessing start method (None: the platform default).

    Yields
    ------
    concurrent.futures.ProcessPoolExecutor
    """
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    earlier = set(multiprocessing.active_children())
    pool = ProcessPoolExecutor(max_workers=int(workers),
                               mp_context=multiprocessing.get_context(context),
                               initializer=worker_initializer)
    try:
        yield pool
    except BaseException:
        stop_workers(pool, keep=earlier)
        raise
    pool.shutdown(wait=True)


def stop_workers(pool: ProcessPoolExecutor, keep: set | None = None) -> None:
    """Kill the pool's workers now and reap them; the pool is unusable afterwards.

    Parameters
    ----------
    pool : concurrent.futures.ProcessPoolExecutor
    keep : set of multiprocessing.Process, optional
        Child processes that existed before the pool. When given, every other
        child of this process is taken for one of the pool's workers: a pool
        found broken drops its workers from its own table before they have
        exited (and ours ignore SIGTERM, which is all it sends them).
    """
    import multiprocessing

    processes = set((getattr(pool, "_processes", None) or {}).values())
    if keep is not None:
        processes |= set(multiprocessing.active_children()) - keep
    for process in processes:
        with contextlib.suppress(Exception):
            process.kill()
    # The pool's manager thread may reap a worker at the same time: our own wait then sees
    # no child and returns at once while the process still reads as alive until that thread
    # records the exit code, so wait for the exit to be recorded, not for one join.
    deadline = time.monotonic() + 2.0
    for process in processes:
        with contextlib.suppress(Exception):
            process.join(timeout=max(deadline - time.monotonic(), 0.0))
            while process.is_alive() and time.monotonic() < deadline:
                time.sleep(0.01)
    # not cancel_futures: once the workers are gone the pool fails the queued futures
    # itself, and Python 3.11 errors on failing a future cancelled before.
    with contextlib.suppress(Exception):
        pool.shutdown(wait=False)
