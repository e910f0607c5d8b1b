"""One way to run independent tasks: in this process, on local worker processes, or on Dask.

An :class:`Executor` runs ``fn(task)`` (or ``fn(shared, task)``) for every
task and hands each result to a callback in the calling thread, in the order
they finish. Whichever way they run:

- Ctrl-C and SIGTERM (see :mod:`crn.runtime.interrupts`) stop the work at
  once: in-process tasks run on a helper thread the calling thread waits for,
  and local worker processes are killed and reaped
  (:func:`crn.runtime.workers.process_pool`); on a cluster the pending tasks
  are cancelled. The results already handed over stay with the caller.
- A task lost with a dead local worker (killed, out of memory) is run again
  on a new pool, up to ``restarts`` times; a Dask scheduler reruns it on
  another worker itself. Tasks must therefore carry their own random streams
  (:mod:`crn.runtime.seeds`), so that a rerun draws the same numbers.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Callable, Iterable, Sequence
from typing import Any

from crn.core.errors import CRNError, WorkerError

__all__ = ["Executor", "POOL_RESTARTS", "probe_scheduler"]

POOL_RESTARTS = 3
"""How many times a local pool whose worker died is replaced before the work gives up."""

_POLL = 0.05  # seconds between checks for an interruption while waiting


class Executor:
    """Runs independent tasks here, on local processes or on a Dask cluster; signal safe.

    Use it as a context manager (it connects to the cluster on entry and
    closes the connection on exit).

    Parameters
    ----------
    workers : int, optional
        Local processes (default: all cores); 1 runs the tasks in turn in this
        process (on a helper thread, so an interruption is seen at once).
    cluster : str, optional
        Address of a Dask distributed scheduler (``"tcp://HOST:PORT"``): the
        tasks go there instead.
    context : str or None, default "spawn"
        multiprocessing start method of local workers (None: the platform default).
    restarts : int, default POOL_RESTARTS
        Times a local pool whose worker died is replaced, its lost tasks rerun.

    Raises
    ------
    ValueError
        For ``workers < 1``.
    CRNError
        On entry, for an unreachable cluster.

    Examples
    --------
    >>> got = {}
    >>> with Executor(workers=1) as ex:
    ...     ex.run(abs, [-1, -2, 3], got.__setitem__)
    >>> got
    {0: 1, 1: 2, 2: 3}
    """

    def __init__(self, workers: int | None = None, cluster: str | None = None, *,
                 context: str | None = "spawn", restarts: int = POOL_RESTARTS):
        if workers is not None and workers < 1:
            raise ValueError(f"`workers` must be at least 1, got {workers}")
        self.workers = (os.cpu_count() or 1) if workers is None else int(workers)
        self.cluster = cluster
        self.context = context
        self.restarts = int(restarts)
        self._client = None

    @property
    def kind(self) -> str:
        """``"cluster"``, ``"processes"`` or ``"inline"``."""
        if self.cluster is not None:
            return "cluster"
        return "processes" if self.workers > 1 else "inline"

    @property
    def size(self) -> int:
        """Workers the tasks are spread over (cluster workers once connected)."""
        if self._client is not None:
            return max(1, len(self._client.scheduler_info().get("workers", {})))
        return self.workers if self.cluster is None else 1

    def __enter__(self) -> Executor:
        if self.cluster is not None:
            self._client = _connect(self.cluster)
        return self

    def __exit__(self, *exc) -> None:
        if self._client is not None:
            self._client.close()
            self._client = None

    def run(self, fn: Callable, tasks: Sequence, on_result: Callable[[int, object], None], *,
            shared: Any = None, weight: Callable[[Any], int] = lambda task: 1,
            noun: str = "tasks") -> None:
        """Run ``fn`` on every task; ``on_result(index, result)`` as each finishes.

        Parameters
        ----------
        fn : callable
            Picklable (module level) unless inline. Called as ``fn(task)``, or
            ``fn(shared, task)`` when ``shared`` is given.
        tasks : sequence
            Picklable unless inline.
        on_result : callable(int, object)
            Called in this thread with the task's index and its result; an
            exception it raises stops the work.
        shared : object, optional
            One object every task needs (a network): sent to each cluster
            worker once rather than with every task.
        weight, noun :
            How much work a task is and what to call it (``len``, ``"runs"``),
            for the warning about a dead worker.

        Raises
        ------
        KeyboardInterrupt
            On Ctrl-C (or SIGTERM under :func:`crn.runtime.interrupts.handling`),
            after stopping the work.
        WorkerError
            When local workers died more than ``restarts`` times, or cluster
            workers kept dying on the same task (the results handed over so far
            are the caller's to report).
        """
        call = _Bound(fn, shared)
        if self.kind == "cluster":
            if self._client is None:
                raise RuntimeError("use the Executor as a context manager to reach a cluster")
            self._on_cluster(fn, tasks, on_result, shared)
        elif self.kind == "processes" and len(tasks) > 1:
            self._on_processes(call, tasks, on_result, weight, noun)
        else:
            _inline(call, tasks, on_result)

    def _on_processes(self, call, tasks, on_result, weight, noun):
        from concurrent.futures.process import BrokenProcessPool

        done: set[int] = set()

        def keep(index, result):
            done.add(index)
            on_result(index, result)

        for restart in range(self.restarts + 1):
            todo = [i for i in range(len(tasks)) if i not in done]
            if not todo:
                return
            try:
                self._pool_pass(call, tasks, todo, keep)
                return
            except BrokenProcessPool as err:
                if restart == self.restarts:
                    raise WorkerError(f"worker processes died {restart + 1} times "
                                      "(killed or out of memory)") from err
                lost = sum(weight(tasks[i]) for i in range(len(tasks)) if i not in done)
                warnings.warn(f"a worker process died; rerunning its {lost} unfinished "
                              f"{noun} on their own random streams", RuntimeWarning,
                              stacklevel=4)

    def _pool_pass(self, call, tasks, todo, keep):
        from concurrent.futures import FIRST_COMPLETED, wait
        from concurrent.futures.process import BrokenProcessPool

        from crn.runtime.workers import process_pool

        with process_pool(self.workers, context=self.context) as pool:
            futures = {pool.submit(call, tasks[i]): i for i in todo}
            pending = set(futures)
            while pending:
                finished, pending = wait(pending, return_when=FIRST_COMPLETED)
                broken = None
                for future in finished:
                    try:
                        result = future.result()
                    except BrokenProcessPool as err:
                        broken = err
                        continue
                    keep(futures[future], result)
                if broken is not None:
                    raise broken

    def _on_cluster(self, fn, tasks, on_result, shared):
        from distributed import as_completed
        from distributed.scheduler import KilledWorker

        client = self._client
        futures = []
        try:
            args = () if shared is None else (client.scatter([shared], broadcast=True)[0],)
            index_of = {}
            for i, task in enumerate(tasks):
                future = client.submit(fn, *args, task, pure=False)
                index_of[future.key] = i
                futures.append(future)
            with client.as_current():
                # a task whose worker dies is rescheduled by the scheduler on another worker;
                # one that kills workers again and again fails with KilledWorker
                for future in as_completed(futures):
                    try:
                        result = future.result()
                    except KilledWorker as err:
                        raise WorkerError(f"cluster workers died running the same task again "
                                          f"and again ({err})") from err
                    on_result(index_of[future.key], result)
        finally:
            pending = [f for f in futures if not f.done()]
            if pending:
                client.cancel(pending)


class _Bound:
    """``fn(task)`` or ``fn(shared, task)``, picklable for worker processes."""

    def __init__(self, fn, shared):
        self.fn = fn
        self.shared = shared

    def __call__(self, task):
        if self.shared is None:
            return self.fn(task)
        return self.fn(self.shared, task)


def _inline(call, tasks: Iterable, on_result) -> None:
    """Run the tasks in turn on a helper thread while this thread waits and hands results on.

    Signals are handled in the main thread only, between Python steps; the
    engines' kernels release the GIL, so waiting here lets Ctrl-C and SIGTERM
    stop the work at once even during a long task. On an interruption the
    task under way is abandoned (its daemon thread stops after it).
    """
    import queue
    import threading

    stop = threading.Event()
    finished: queue.SimpleQueue = queue.SimpleQueue()
    failure = []

    def work():
        try:
            for i, task in enumerate(tasks):
                if stop.is_set():
                    return
                finished.put((i, call(task)))
        except BaseException as err:  # handed to the waiting thread
            failure.append(err)
        finally:
            finished.put(None)

    thread = threading.Thread(target=work, name="crn-tasks", daemon=True)
    thread.start()
    try:
        while True:
            try:
                item = finished.get(timeout=_POLL)
            except queue.Empty:
                continue
            if item is None:
                break
            on_result(*item)
    except BaseException:
        stop.set()
        raise
    if failure:
        raise failure[0]


def probe_scheduler(address: str) -> None:
    """Fail fast on a malformed or refused TCP address instead of waiting out Dask's retries.

    Parameters
    ----------
    address : str
        ``tcp://HOST:PORT``, ``tls://HOST:PORT`` or ``HOST:PORT``; other schemes pass unchecked.

    Raises
    ------
    CRNError
        When a TCP or TLS address has no host or port, or nothing listens there.
    """
    import socket
    from urllib.parse import urlsplit

    parts = urlsplit(address if "://" in address else f"tcp://{address}")
    if parts.scheme not in ("tcp", "tls"):
        return
    try:
        port = parts.port
    except ValueError:
        port = None
    if not parts.hostname or port is None:
        raise CRNError(f"{address!r} is not a scheduler address; expected tcp://HOST:PORT")
    try:
        socket.create_connection((parts.hostname, port), timeout=5).close()
    except OSError as err:
        raise CRNError(f"cannot reach the Dask scheduler at {address}: {err}") from err


def _connect(address: str):
    try:
        from distributed import Client
    except ImportError as err:  # pragma: no cover - dask is a dependency
        raise CRNError("--cluster needs dask.distributed") from err
    probe_scheduler(address)
    try:
        return Client(address, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError) as err:
        raise CRNError(f"cannot reach the Dask scheduler at {address}: {err}") from err
