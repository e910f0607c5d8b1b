"""Ensembles of exact stochastic runs: one driver, a table of engines, local or cluster workers.

Every run r of an ensemble draws from child r of ``SeedSequence(entropy)``
(``SeedSequence.spawn``), and its result depends on nothing else, so the same
seed gives the same ensemble in process, on a local process pool of any size
and on a Dask cluster.
"""

from __future__ import annotations

import importlib
import math
import os
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from crn.core.errors import CRNError, WorkerError
from crn.core.network import Network
from crn.core.outcome import NO_CONSENSUS, tally
from crn.core.stats import time_summary
from crn.engines import ENGINES
from crn.engines.base import Trajectory

__all__ = ["Ensemble", "SimulationInterrupted", "simulate", "ENGINES", "choose_engine",
           "default_horizon", "run_chunk", "probe_scheduler", "AUTO_BATCHED_FROM"]

AUTO_BATCHED_FROM = 100_000
"""Agents from which ``engine="auto"`` runs a protocol with the batched engine."""


@dataclass(frozen=True)
class Ensemble:
    """R stochastic runs of one network.

    Attributes
    ----------
    runs : int
        Runs in the ensemble (finished runs, if it was interrupted).
    engine : str
        The engine that ran them (``"auto"`` resolved).
    seed_entropy : int
        Entropy of the root ``SeedSequence``; ``simulate(..., rng=seed_entropy)``
        reproduces the ensemble.
    labels : list of str or None, length runs
        First consensus label of each run (None: none by the horizon).
    consensus_times : ndarray of float64, shape (runs,)
        First consensus time, NaN for none.
    final_labels : list of str or None
        Consensus label at the end of each run.
    held : ndarray of bool, shape (runs,)
        Whether the first consensus label still held at the end.
    times : ndarray of float64, shape (n_times,)
        Sample times.
    counts : ndarray of int64, shape (runs, n_times, n_species)
    events : ndarray of int64, shape (runs,)
        Reactions fired per run (-1 when the engine does not report it).
    end_times : ndarray of float64, shape (runs,)
    statuses : list of str
        ``"horizon"``, ``"silent"`` or ``"consensus"`` per run.
    until : float
        The horizon.
    species : tuple of str
    run_index : ndarray of int64, shape (runs,)
        Which child stream each run used (0..requested-1; all of them unless interrupted).
    requested : int
        Runs asked for.
    outcome_labels : tuple of str
        Every label a run can decide on (the network's output labels), so that
        :meth:`outcomes` lists the labels no run reached, with 0.
    """

    runs: int
    engine: str
    seed_entropy: int
    labels: list
    consensus_times: np.ndarray
    final_labels: list
    held: np.ndarray
    times: np.ndarray
    counts: np.ndarray
    events: np.ndarray
    end_times: np.ndarray
    statuses: list
    until: float
    species: tuple
    run_index: np.ndarray = field(default=None)
    requested: int = 0
    outcome_labels: tuple = ()

    @property
    def complete(self) -> bool:
        """Whether every requested run finished."""
        return self.runs == self.requested

    def outcomes(self) -> dict[str, int]:
        """First-consensus label -> number of runs, with ``"none"`` for no consensus.

        Every label of :attr:`outcome_labels` and ``"none"`` appear, with 0 when no run got it.
        """
        out = dict.fromkeys(self.outcome_labels, 0)
        out.update(tally(self.labels))
        out.setdefault(NO_CONSENSUS, 0)
        return out

    def consensus_time_summary(self) -> dict | None:
        """``{mean, median, q05, q95}`` of the consensus times of runs that reached one."""
        return time_summary(self.consensus_times)

    @classmethod
    def from_trajectories(cls, trajectories, *, engine, seed_entropy, until, species,
                          times, run_index=None, requested=None, outcome_labels=()
                          ) -> Ensemble:
        """Collect runs (in run order) into an ensemble."""
        trajectories = list(trajectories)
        r = len(trajectories)
        n_species = len(species)
        counts = (np.stack([t.counts for t in trajectories]) if r
                  else np.zeros((0, len(times), n_species), dtype=np.int64))
        return cls(
            runs=r, engine=engine, seed_entropy=seed_entropy,
            labels=[t.outcome.label for t in trajectories],
            consensus_times=np.array([np.nan if t.outcome.time is None else t.outcome.time
                                      for t in trajectories], dtype=np.float64),
            final_labels=[t.outcome.final_label for t in trajectories],
            held=np.array([t.outcome.held for t in trajectories], dtype=bool),
            times=np.asarray(times, dtype=np.float64), counts=counts.astype(np.int64),
            events=np.array([t.events for t in trajectories], dtype=np.int64),
            end_times=np.array([t.end_time for t in trajectories], dtype=np.float64),
            statuses=[t.status for t in trajectories], until=float(until),
            species=tuple(species),
            run_index=np.arange(r, dtype=np.int64) if run_index is None
            else np.asarray(run_index, dtype=np.int64),
            requested=r if requested is None else int(requested),
            outcome_labels=tuple(outcome_labels),
        )


class SimulationInterrupted(KeyboardInterrupt):
    """Ctrl-C during :func:`simulate`; ``ensemble`` holds the runs that finished.

    A subclass of KeyboardInterrupt, so code that does not look for it still
    sees an ordinary interruption.
    """

    def __init__(self, ensemble: Ensemble):
        super().__init__(f"interrupted after {ensemble.runs} of {ensemble.requested} runs")
        self.ensemble = ensemble


def default_horizon(net: Network) -> float:
    """The horizon :func:`simulate` uses when ``until`` is None.

    For a protocol's network: ``20 (1 + ln n)`` parallel time. The protocols
    this tool targets decide in O(log n) parallel time (epidemic: about ln n;
    approximate majority: O(log n) w.h.p., Angluin, Aspnes, Eisenstat 2008), so
    this is many times their typical consensus time; runs that fall silent at
    consensus stop there anyway. For other networks: ten times the slowest
    time scale ``1 / (k (N / v)^(order-1))`` of a reaction of order >= 1 at the
    initial total count N (``1 / k`` per unit volume for zero-order ones alone).

    Parameters
    ----------
    net : Network

    Returns
    -------
    float
    """
    n = max(net.population, 2)
    if net.from_protocol:
        return 20.0 * (1.0 + math.log(n))
    scales = []
    for k, order in zip(net.rates, net.orders, strict=True):
        if k > 0 and order >= 1:
            scales.append(1.0 / (k * (n / net.volume) ** (order - 1)))
    if not scales:
        scales = [1.0 / (k * net.volume) * n for k in net.rates if k > 0] or [1.0]
    return 10.0 * max(scales)


def choose_engine(net: Network, engine: str = "auto") -> str:
    """Resolve ``engine`` (``"auto"``: batched for protocols from AUTO_BATCHED_FROM agents).

    Raises
    ------
    CRNError
        For an unknown engine name.
    """
    if engine not in ("auto", *ENGINES):
        raise CRNError(f"unknown engine {engine!r}; choose auto, {', '.join(ENGINES)}")
    if engine != "auto":
        return engine
    if net.from_protocol and net.population >= AUTO_BATCHED_FROM and _available("batched"):
        return "batched"
    return "direct"


def _available(engine: str) -> bool:
    try:
        _engine(engine)
    except (ImportError, AttributeError):
        return False
    return True


def _engine(name: str) -> Callable[..., Trajectory]:
    module, attr = ENGINES[name]
    return getattr(importlib.import_module(module), attr)


def run_chunk(net: Network, engine: str, until: float, times, stop_at_consensus: bool,
              seeds, run_index: int | None = None) -> list[Trajectory]:
    """Run one engine once per child seed (the task sent to pool and cluster workers).

    ``run_index`` (the index of the first seed's run) serves the worker-fault test hook.
    """
    if run_index is not None and os.environ.get(KILL_WORKER_HOOK):
        _maybe_die(run_index, len(seeds))
    run = _engine(engine)
    return [run(net, until=until, times=times, rng=np.random.default_rng(s),
                stop_at_consensus=stop_at_consensus) for s in seeds]


def _maybe_die(first: int, size: int) -> None:
    import signal

    target, _, marker = os.environ[KILL_WORKER_HOOK].partition(":")
    if not first <= int(target) < first + size:
        return
    if marker:
        try:
            os.close(os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY))
        except FileExistsError:
            return
    os.kill(os.getpid(), signal.SIGKILL)


def _root(rng) -> np.random.SeedSequence:
    if isinstance(rng, np.random.SeedSequence):
        return np.random.SeedSequence(rng.entropy, spawn_key=rng.spawn_key)
    if isinstance(rng, np.random.Generator):
        return np.random.SeedSequence(int(rng.integers(0, 2**63)))
    if rng is None or isinstance(rng, int | np.integer):
        return np.random.SeedSequence(None if rng is None else int(rng))
    raise TypeError(f"`rng` must be a Generator, int, SeedSequence or None, got {type(rng)}")


def simulate(net: Network, *, runs: int = 1, until: float | None = None, times=None,
             engine: str = "auto", rng=None, workers: int | None = None,
             cluster: str | None = None, stop_at_consensus: bool = False,
             progress: Callable[[int, int], None] | None = None, reduce=None) -> Ensemble:
    """Run an ensemble of exact stochastic simulations.

    Parameters
    ----------
    net : Network
    runs : int, default 1
    until : float, optional
        Horizon in network time (parallel time for protocols); default
        :func:`default_horizon`.
    times : array_like of float, shape (n_times,), optional
        Sample times in ``[0, until]``; default 101 evenly spaced points.
    engine : {"auto", "direct", "batched", "reference"}
        ``"direct"``: optimised direct method (:func:`crn.engines.direct.run_direct`);
        ``"batched"``: batched exact simulation of protocols; ``"reference"``:
        the GillesPy2 library; ``"auto"``: see :func:`choose_engine`.
    rng : numpy.random.Generator, int, SeedSequence or None
        Root of the child streams; None draws fresh entropy (recorded in the result).
    workers : int, optional
        Local processes (default: all cores); 1 runs in this process.
    cluster : str, optional
        Address of a Dask distributed scheduler (``"tcp://HOST:PORT"``); the
        runs go there instead of to local processes.
    stop_at_consensus : bool, default False
    progress : callable(done, total), optional
        Called as runs finish.
    reduce : object with ``add(index, counts)``, optional
        Receives each run's counts at ``times`` as it finishes (for instance a
        :class:`crn.solvers.time_course.TimeCourseAccumulator`); the ensemble then keeps
        only each run's final counts (``times`` and ``counts`` hold the last
        sample), so memory does not grow with runs x samples.

    Returns
    -------
    Ensemble
        Runs in child-stream order.

    Raises
    ------
    ValueError
        For ``runs < 1`` or ``workers < 1``.
    CRNError
        For an unknown engine or an unreachable cluster.
    SimulationInterrupted
        On Ctrl-C (or SIGTERM under :func:`crn.runtime.interrupts.handling`), carrying
        the finished runs.
    WorkerError
        When local worker processes keep dying (a dead worker's runs are rerun
        up to :data:`POOL_RESTARTS` times first), carrying the finished runs
        as ``partial``.

    References
    ----------
    NumPy, "Parallel random number generation" (``SeedSequence.spawn``).

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> net = load_model("models/epidemic.toml", {"n": 50}).network
    >>> ens = simulate(net, runs=4, rng=1, workers=1, stop_at_consensus=True)
    >>> ens.outcomes()
    {'I': 4, 'none': 0}
    """
    if isinstance(runs, bool) or not isinstance(runs, int | np.integer) or runs < 1:
        raise ValueError(f"`runs` must be a positive integer, got {runs!r}")
    if workers is not None and workers < 1:
        raise ValueError(f"`workers` must be at least 1, got {workers}")
    name = choose_engine(net, engine)
    until = default_horizon(net) if until is None else float(until)
    if not np.isfinite(until) or until <= 0:
        raise ValueError(f"`until` must be a positive finite time, got {until}")
    times = (np.linspace(0.0, until, 101) if times is None
             else np.asarray(times, dtype=np.float64).reshape(-1))
    root = _root(rng)
    children = root.spawn(int(runs))
    workers = (os.cpu_count() or 1) if workers is None else int(workers)
    done: dict[int, Trajectory] = {} if reduce is None else _Reducing(reduce)
    report = progress or (lambda d, t: None)
    task = (net, name, until, times, bool(stop_at_consensus))
    try:
        if cluster is not None:
            _on_cluster(cluster, task, children, done, report)
        elif workers == 1 or runs == 1:
            _in_thread(task, children, done, report)
        else:
            _on_pool(workers, task, children, done, report)
    except KeyboardInterrupt as err:
        raise SimulationInterrupted(_collect(done, name, root, until, net, times, runs)) from err
    except WorkerError as err:
        err.partial = _collect(done, name, root, until, net, times, runs)
        raise
    return _collect(done, name, root, until, net, times, runs)


class _Reducing(dict):
    """Run index -> trajectory that hands each run's counts to a reducer and keeps the last."""

    def __init__(self, reducer):
        super().__init__()
        self.reducer = reducer

    def __setitem__(self, index, trajectory):
        import dataclasses

        self.reducer.add(index, trajectory.counts)
        super().__setitem__(index, dataclasses.replace(
            trajectory, times=trajectory.times[-1:], counts=trajectory.counts[-1:]))


def _collect(done, name, root, until, net, times, runs) -> Ensemble:
    if isinstance(done, _Reducing):
        times = times[-1:]
    order = sorted(done)
    return Ensemble.from_trajectories([done[i] for i in order], engine=name,
                                      seed_entropy=int(root.entropy), until=until,
                                      species=net.species, times=times, run_index=order,
                                      requested=runs, outcome_labels=net.labels)


def _chunks(n_runs: int, workers: int) -> list[range]:
    size = max(1, min(8, n_runs // (32 * workers)))
    return [range(i, min(i + size, n_runs)) for i in range(0, n_runs, size)]


def _in_thread(task, children, done, report):
    """Run in turn on a helper thread while this thread waits, so that Ctrl-C and SIGTERM
    (handled in the main thread only) stop the ensemble at once even during a long run.

    The engines' kernels release the GIL; on an interruption the run under way
    is abandoned (its thread stops after it) and the finished runs are kept.
    """
    import queue
    import threading

    stop = threading.Event()
    finished: queue.SimpleQueue = queue.SimpleQueue()
    failure = []

    def work():
        try:
            for i, child in enumerate(children):
                if stop.is_set():
                    return
                finished.put((i, run_chunk(*task, [child])[0]))
        except BaseException as err:  # handed to the waiting thread
            failure.append(err)
        finally:
            finished.put(None)

    thread = threading.Thread(target=work, name="crn-runs", daemon=True)
    thread.start()
    try:
        while True:
            try:
                item = finished.get(timeout=0.05)
            except queue.Empty:
                continue
            if item is None:
                break
            done[item[0]] = item[1]
            report(len(done), len(children))
    except BaseException:
        stop.set()
        raise
    if failure:
        raise failure[0]


POOL_RESTARTS = 3
"""How many times a local pool whose worker died is replaced before the ensemble gives up."""

KILL_WORKER_HOOK = "CRN_TEST_KILL_WORKER"
"""Test hook ``RUN[:MARKER]``: a pool worker SIGKILLs itself on starting the chunk holding run
RUN (once, if the MARKER file does not exist yet; it is then created; always without one)."""


def _on_pool(workers, task, children, done, report):
    """Run the chunks on local processes; a chunk lost with a dead worker is rerun on a new pool.

    A chunk's runs use the chunk's own child streams, so rerunning it gives the
    same trajectories: the ensemble is the same as if no worker had died.
    """
    from concurrent.futures.process import BrokenProcessPool

    chunks = _chunks(len(children), workers)
    for restart in range(POOL_RESTARTS + 1):
        todo = [chunk for chunk in chunks if chunk[0] not in done]
        if not todo:
            return
        try:
            _pool_pass(workers, task, children, todo, done, report)
            return
        except BrokenProcessPool as err:
            lost = sum(len(chunk) for chunk in chunks if chunk[0] not in done)
            if restart == POOL_RESTARTS:
                raise WorkerError(
                    f"worker processes died {restart + 1} times (killed or out of memory); "
                    f"{len(done)} of {len(children)} runs finished, {lost} lost") from err
            warnings.warn(f"a worker process died; rerunning its {lost} unfinished runs "
                          "on their own random streams", RuntimeWarning, stacklevel=2)


def _pool_pass(workers, task, children, chunks, done, report):
    from concurrent.futures import FIRST_COMPLETED, wait
    from concurrent.futures.process import BrokenProcessPool

    from crn.runtime.workers import process_pool

    with process_pool(workers) as pool:
        futures = {pool.submit(run_chunk, *task, [children[i] for i in chunk],
                               run_index=chunk.start): chunk
                   for chunk in chunks}
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
                for i, trajectory in zip(futures[future], result, strict=True):
                    done[i] = trajectory
            report(len(done), len(children))
            if broken is not None:
                raise broken


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


def _on_cluster(address, task, children, done, report):
    try:
        from distributed import Client, as_completed
        from distributed.scheduler import KilledWorker
    except ImportError as err:  # pragma: no cover - dask is a dependency
        raise CRNError("--cluster needs dask.distributed") from err
    probe_scheduler(address)
    try:
        client = Client(address, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError) as err:
        raise CRNError(f"cannot reach the Dask scheduler at {address}: {err}") from err
    futures = []
    try:
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        scattered = client.scatter(task[0], broadcast=True)
        chunk_of = {}
        for chunk in _chunks(len(children), n_workers):
            future = client.submit(run_chunk, scattered, *task[1:],
                                   [children[i] for i in chunk], pure=False)
            chunk_of[future.key] = chunk
            futures.append(future)
        with client.as_current():
            # a chunk whose worker dies is rescheduled by the scheduler on another worker
            # (same child streams, same numbers); one that kills workers repeatedly fails
            for future in as_completed(futures):
                try:
                    result = future.result()
                except KilledWorker as err:
                    raise WorkerError(f"cluster workers died running the same runs again and "
                                      f"again ({err}); {len(done)} of {len(children)} runs "
                                      "finished") from err
                for i, trajectory in zip(chunk_of[future.key], result, strict=True):
                    done[i] = trajectory
                report(len(done), len(children))
    finally:
        if futures:
            client.cancel([f for f in futures if not f.done()])
        client.close()
