"""Resource guards: estimate memory and time before a large computation, refuse with the
estimate when it does not fit.

Every command that can outgrow the machine (exact analysis, configuration
enumeration in ``verify``, regime maps, stochastic ensembles and their time
courses) calls one of the ``check_*`` functions before any work. Each builds a
:class:`Estimate` and :func:`enforce` refuses it (CRNError, exit status 2)
when its memory exceeds ``max_memory`` (default: half the machine's RAM) or,
for stochastic work, its time exceeds :data:`WORK_LIMIT_SECONDS`; ``force``
overrides both. The estimates are rough upper bounds (factors of a few), meant
to stop hopeless requests - ``ssa --set n=1e18`` - at once instead of after
hours or an out-of-memory kill.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

from crn.core.errors import CRNError
from crn.core.network import Network, propensities

if TYPE_CHECKING:
    from collections.abc import Callable, Sequence

__all__ = ["Estimate", "machine_memory", "default_max_memory", "parse_memory", "enforce",
           "exact_estimate", "ensemble_estimate", "time_course_bytes", "regime_map_estimate",
           "verify_estimate", "format_bytes", "format_seconds", "WORK_LIMIT_SECONDS",
           "DIRECT_SECONDS_PER_EVENT", "BATCHED_SECONDS_PER_STEP", "EXACT_SECONDS_PER_TRANSITION",
           "EXACT_FLOPS_PER_SECOND", "exact_seconds"]

# Cost model. Measured with crn.engines on approximate majority, n = 1e5 and 1e6, on a
# shared 2-core machine: the direct method 3.1e-7 - 3.4e-7 s per reaction event, the batched
# engine 0.9e-5 - 1.0e-5 s per sqrt(n) x parallel time; the exact chain about 1e-6 s per
# transition for enumeration, assembly and solves, and the nested-dissection factorisation
# 1e10 floating-point operations per second (one core; n = 1000 to 3000). Rounded to one
# significant figure.
DIRECT_SECONDS_PER_EVENT = 3e-7
BATCHED_SECONDS_PER_STEP = 1e-5
EXACT_SECONDS_PER_TRANSITION = 1e-6
EXACT_FLOPS_PER_SECOND = 1e10

WORK_LIMIT_SECONDS = 24 * 3600.0
"""Stochastic work estimated above this wall-clock time is refused unless forced."""

_UNITS = {"": 1, "b": 1, "k": 2**10, "kb": 10**3, "kib": 2**10, "m": 2**20, "mb": 10**6,
          "mib": 2**20, "g": 2**30, "gb": 10**9, "gib": 2**30, "t": 2**40, "tb": 10**12,
          "tib": 2**40}


@dataclass(frozen=True)
class Estimate:
    """What a computation will need.

    Attributes
    ----------
    what : str
        The computation, for messages (``"exact analysis of n = 3000"``).
    memory : float
        Peak bytes.
    seconds : float
        Wall-clock seconds (on the given workers).
    detail : str
        The sizes behind the numbers (``"4,504,501 configurations"``).
    stochastic : bool
        Whether the time limit applies (stochastic work; exact work is bounded by memory).
    """

    what: str
    memory: float
    seconds: float
    detail: str = ""
    stochastic: bool = False

    def describe(self) -> str:
        """``"about 3 min and 1.2 GiB of memory (up to 4,504,501 configurations)"``."""
        tail = f" ({self.detail})" if self.detail else ""
        return (f"about {format_seconds(self.seconds)} and {format_bytes(self.memory)} of "
                f"memory{tail}")


def machine_memory() -> int:
    """Physical memory of the machine in bytes (0 when unknown)."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):  # pragma: no cover - not POSIX
        return 0


def default_max_memory() -> int:
    """Half the machine's RAM (8 GiB when it cannot be read)."""
    total = machine_memory()
    return total // 2 if total > 0 else 8 * 2**30


def parse_memory(text: str | int) -> int:
    """``"4G"``, ``"512MiB"``, ``"2.5GB"``, ``"1000000"`` -> bytes (K, M, G, T are binary).

    Raises
    ------
    CRNError
        For anything else, or a size that is not positive.
    """
    if isinstance(text, int | float) and not isinstance(text, bool):
        value, unit = float(text), ""
    else:
        match = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([a-zA-Z]*)\s*",
                             str(text))
        if not match or match.group(2).lower() not in _UNITS:
            raise CRNError(f"--max-memory: cannot read {text!r} as a size (e.g. 4G, 512M, "
                           "2.5GB)")
        value, unit = float(match.group(1)), match.group(2).lower()
    size = value * _UNITS[unit]
    if not math.isfinite(size) or size <= 0:
        raise CRNError(f"--max-memory: the size must be positive, got {text!r}")
    return int(size)


def format_bytes(size: float) -> str:
    """Bytes in binary units: ``"1.5 GiB"``."""
    if not math.isfinite(size):
        return "unboundedly much memory"
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"):
        if size < 1024 or unit == "EiB":
            return f"{size:.3g} {unit}"
        size /= 1024
    return f"{size:.3g} EiB"  # pragma: no cover


def format_seconds(seconds: float) -> str:
    """``"40 s"``, ``"12 min"``, ``"3.5 h"``, ``"2.1e+14 years"``."""
    if not math.isfinite(seconds):
        return "forever"
    for limit, unit, size in ((120, "s", 1), (7200, "min", 60), (172800, "h", 3600),
                              (3.15e7 * 2, "days", 86400)):
        if seconds < limit:
            return f"{seconds / size:.2g} {unit}"
    return f"{seconds / 3.15e7:.2g} years"


def enforce(estimate: Estimate, *, max_memory: int | None = None, force: bool = False) -> None:
    """Refuse ``estimate`` when it exceeds the memory limit or, if stochastic, the time limit.

    Raises
    ------
    CRNError
        With the estimate and the way out (``--force``), unless ``force``.
    """
    if force:
        return
    limit = default_max_memory() if max_memory is None else int(max_memory)
    if estimate.memory > limit:
        raise CRNError(f"{estimate.what} needs {estimate.describe()}, more than --max-memory "
                       f"{format_bytes(limit)}; lower n or the runs, raise --max-memory, or "
                       "add --force to try anyway")
    if estimate.stochastic and estimate.seconds > WORK_LIMIT_SECONDS:
        raise CRNError(f"{estimate.what} needs {estimate.describe()}, more than "
                       f"{format_seconds(WORK_LIMIT_SECONDS)}; lower n, --runs or --until, or "
                       "add --force to run anyway")


def exact_seconds(net: Network, states: int) -> float:
    """Wall-clock seconds of the exact chain over ``states`` configurations (one core).

    Enumeration, assembly and solves cost about :data:`EXACT_SECONDS_PER_TRANSITION`
    per transition; on a two-dimensional lattice the nested-dissection
    factorisation adds about 37 N^1.5 floating-point operations (measured: 13 and
    356 GFlop at N = 0.5 and 4.5 million) at :data:`EXACT_FLOPS_PER_SECOND`.
    """
    from crn.solvers.configurations import lattice_dimension

    transitions = states * max(int((net.rates > 0).sum()), 1)
    seconds = transitions * EXACT_SECONDS_PER_TRANSITION
    if lattice_dimension(net) >= 2:
        seconds += 37.0 * states ** 1.5 / EXACT_FLOPS_PER_SECOND
    return seconds


def exact_estimate(net: Network, what: str | None = None) -> Estimate:
    """Memory and time of the exact chain of ``net`` (enumeration and absorption solve).

    Uses :func:`crn.solvers.configurations.estimate_configurations` (an upper bound on the
    reachable configurations), :func:`crn.solvers.configurations.estimate_memory` and
    :func:`exact_seconds`.

    Raises
    ------
    CRNError
        When no conservation law bounds the state space.
    """
    from crn.solvers.configurations import estimate_configurations, estimate_memory

    states = estimate_configurations(net)
    return Estimate(what or f"exact analysis of {net.name}",
                    memory=float(estimate_memory(net, states)),
                    seconds=exact_seconds(net, states),
                    detail=f"up to {states:,} configurations")


def verify_estimate(net: Network, max_n: int) -> Estimate:
    """``verify`` up to ``max_n``: the largest case's memory, every case's time.

    The cases are solved one after another, so memory is that of the largest
    (n = max_n) and time the sum over n of (n + 1) splits.
    """
    from crn.solvers.configurations import estimate_configurations, estimate_memory

    first, second = net.inputs if net.inputs is not None else (0, min(1, net.n_species - 1))
    live = max(int((net.rates > 0).sum()), 1)

    def states(n):
        x0 = net.initial.copy()
        x0[first], x0[second] = n // 2, n - n // 2  # an even split reaches the most
        return estimate_configurations(net.with_initial(x0))

    largest = states(max_n)
    total = sum((n + 1) * states(n) for n in range(2, max_n + 1)) if max_n <= 2000 \
        else (max_n + 1) * largest * max_n
    return Estimate(f"verify up to n = {max_n}", memory=float(estimate_memory(net, largest)),
                    seconds=total * live * EXACT_SECONDS_PER_TRANSITION,
                    detail=f"up to {largest:,} configurations at n = {max_n}")


def _events_per_run(net: Network, until: float) -> float:
    """Upper estimate of reaction events in one run to ``until``.

    A protocol's network: at most one event per interaction, n interactions per
    unit of parallel time, so n * until. Other networks: the total propensity
    at the initial counts times ``until``.
    """
    if net.from_protocol:
        return float(net.population) * until
    try:
        rate = float(propensities(net, net.initial.astype(float)).sum())
    except (OverflowError, ValueError, FloatingPointError):
        rate = math.inf
    return rate * until if math.isfinite(rate) else math.inf


def time_course_bytes(runs: int, n_times: int, n_species: int) -> float:
    """Bytes of the counts kept for ``runs`` runs sampled at ``n_times`` times (int64)."""
    return 8.0 * runs * n_times * max(n_species, 1)


def ensemble_estimate(net: Network, *, runs: int, until: float, engine: str, workers: int,
                      n_times: int = 101) -> Estimate:
    """Time of ``runs`` stochastic runs from the engine's cost model, and their memory.

    Parameters
    ----------
    net : Network
    runs : int
    until : float
        Horizon (parallel time for protocols).
    engine : {"direct", "batched", "reference"}
        Resolved engine (the reference engine is costed as the direct method).
    workers : int
        Processes sharing the runs.
    n_times : int
        Sample times per run (the time course kept in memory).
    """
    events = _events_per_run(net, until)
    if engine == "batched":
        per_run = BATCHED_SECONDS_PER_STEP * math.sqrt(max(net.population, 1)) * until
    else:
        per_run = DIRECT_SECONDS_PER_EVENT * events
    seconds = per_run * runs / max(1, min(workers, runs))
    return Estimate(f"{runs:,} {engine} runs of {net.name} to t = {until:.4g}",
                    memory=time_course_bytes(runs, n_times, net.n_species), seconds=seconds,
                    detail=f"up to {events:.3g} events per run", stochastic=True)


def regime_map_estimate(networks: Callable[[int, int], Network], cells: Sequence[tuple[int, int]],
                        *, runs_max: int, until: float | None, method: str,
                        exact_max: int, workers: int) -> Estimate:
    """A regime map: the largest cell's memory, every cell's time (at most ``runs_max``
    stochastic runs, or the exact chain where the cell is solved exactly).
    """
    from crn.solvers.configurations import estimate_configurations
    from crn.solvers.simulate import choose_engine, default_horizon

    memory, seconds = 0.0, 0.0
    for n, gap in cells:
        net = networks(int(n), int(gap))
        exact = method == "exact"
        if method == "auto":
            try:
                exact = estimate_configurations(net) <= exact_max
            except CRNError:
                exact = False
        if exact:
            one = exact_estimate(net)
        else:
            horizon = until if until is not None else default_horizon(net)
            one = ensemble_estimate(net, runs=runs_max, until=horizon,
                                    engine=choose_engine(net), workers=1, n_times=101)
        memory = max(memory, one.memory)
        seconds += one.seconds
    return Estimate(f"the regime map over {len(cells)} cells", memory=memory,
                    seconds=seconds / max(1, min(workers, len(cells))), stochastic=True,
                    detail=f"largest n = {max((c[0] for c in cells), default=0):,}")
