"""Regime maps: where, over copy number n and input gap, the mean field's decision can be trusted.

For each cell (n, gap) the ODE gives a label and a consensus time; exact
analysis (small state spaces) or seeded stochastic runs give the probability
that a run disagrees with the ODE's label, with a 95% interval simultaneous
over the sequential looks (Clopper-Pearson bounds whose error levels are spent
over the looks by a fixed plan, :func:`crn.analyses.probes.look_levels`), and
the stochastic median consensus time. A cell is ``misleading`` when the interval
lies wholly above the risk, ``ok`` when wholly below, ``uncertain`` otherwise
(docs/design.md); its time flag says whether the stochastic median and the ODE time
differ by more than a factor. The boundary where the disagreement probability
crosses the risk is fitted as ``gap_c ~ n**b`` on log-log axes.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING, Any, cast

import numpy as np

from crn.analyses.probes import (
    FIRST_ROUND,
    configurations,
    exact_absorption,
    gap_for_fraction,
    late_consensus_bound,
    ode_decision,
    sample_until_decided,
    stochastic_decisions,
)
from crn.core.errors import CRNError
from crn.core.network import Network
from crn.core.outcome import correct_label
from crn.runtime.executor import Executor
from crn.runtime.seeds import root_seed

if TYPE_CHECKING:
    from crn.core.types import SeedLike

__all__ = [
    "FLAGS",
    "TIME_FLAGS",
    "RegimeCell",
    "Boundary",
    "RegimeMap",
    "plan_cells",
    "evaluate_cell",
    "implied_cell",
    "regime_map",
    "fit_boundary",
    "risk_flag",
    "time_flag",
    "DEFAULT_EXACT_MAX",
    "BATCHED_FROM",
    "MIN_BRACKETED",
    "merged_fractions",
]

FLAGS = ("ok", "uncertain", "misleading")
#: ``slower``/``faster``: the stochastic median exceeds / falls short of the ODE time by more
#: than the factor (``slower`` also when more than half the runs have no consensus by a horizon of
#: at least the factor times the ODE time); ``unknown``: otherwise without a time to compare.
TIME_FLAGS = ("ok", "slower", "faster", "unknown")
#: Largest estimated configuration count for which a cell is solved exactly.
DEFAULT_EXACT_MAX = 100_000
#: Fewest n with a bracketed crossing for which an exponent is fitted (two points always
#: lie on a line, so they say nothing about a power law).
MIN_BRACKETED = 3
#: What the exponent's ``low``/``high`` are, in every output.
INTERVAL_NAME = "95% bootstrap confidence interval over the sampled cells"
#: From this many agents a protocol's sampled cells use the batched engine (the default
#: switches only from :data:`crn.solvers.simulate.AUTO_BATCHED_FROM`): measured on
#: approximate majority, one run took 1.9 ms direct and 5.1 ms batched at n = 1e3, 48 ms
#: and 17 ms at n = 1e4 (benchmarks/bench_regimes.py).
BATCHED_FROM = 5_000
_HORIZON_FACTOR = 10.0
_TIMING_RUNS = 200


@dataclass(frozen=True)
class RegimeCell:
    """One cell of a regime map.

    Attributes
    ----------
    n, gap : int
        Agents counted by the two inputs, and the difference of their counts.
    ode_label : str or None
        The mean field's consensus label (None: no consensus by the horizon).
    ode_time : float or None
        The mean field's consensus time (parallel time for protocols).
    p_wrong, low, high : float
        Probability that a stochastic run disagrees with ``ode_label`` (no
        consensus by the horizon counts as disagreement). For stochastic cells
        ``[low, high]`` is a 95% interval simultaneous over the sequential
        looks, the interval the stopping rule and the flag use: Clopper-Pearson
        bounds with one-sided levels that add up to 0.025 per side over the K
        looks the round schedule can make (union bound); the lower bound spends
        ``0.025 / K`` at each look, the upper bound keeps every ``ok`` decision
        of that even split and moves its spare error to the first look where
        no disagreement can decide (:func:`crn.analyses.probes.look_levels`).
        For exact cells ``p_wrong`` is the exact probability of eventually
        disagreeing and ``[low, high]`` bounds the probability
        of disagreeing by the horizon: consensus reached only after the
        horizon is bounded by Cantelli's inequality (from the exact mean and
        standard deviation of the time given consensus). With an ODE label,
        ``low = p_wrong`` (never settling on the label) and ``high`` adds that
        bound; without one (a run agrees when it has no consensus by the
        horizon), ``high = p_wrong = P(consensus)`` and ``low`` subtracts it.
    wrong, runs : int
        Disagreeing runs and runs (0 and 0 for exact cells).
    flag : str
        ``ok``, ``uncertain`` or ``misleading``.
    time_flag : str
        One of :data:`TIME_FLAGS`.
    ssa_median_time : float or None
        Median stochastic consensus time (runs without consensus count as
        later than any; None when more than half have none).
    method : str
        ``exact`` or ``stochastic``.
    horizon : float
        Time limit of the stochastic runs or transient analysis.
    correct_label : str or None
        The right answer (the majority input's label).
    implied_by : int or None
        The gap of the ``ok`` cell (same n) whose bound this cell inherits, or
        None. Set when the protocol is monotone towards the ODE label and this
        cell's start dominates that cell's (:mod:`crn.analyses.monotone`): then
        ``high`` is that cell's upper bound at that cell's horizon (which this
        cell uses too), and ``p_wrong``, ``low``, the median time and the time
        flag come from this cell's own first round of runs (``low`` a 95%
        Clopper-Pearson bound over them).
    """

    n: int
    gap: int
    ode_label: str | None
    ode_time: float | None
    p_wrong: float
    low: float
    high: float
    wrong: int
    runs: int
    flag: str
    time_flag: str
    ssa_median_time: float | None
    method: str
    horizon: float
    correct_label: str | None = None
    implied_by: int | None = None

    def to_dict(self) -> dict:
        """The cell as a JSON-ready dict."""
        return asdict(self)

    @property
    def how(self) -> str:
        """``exact``, ``stochastic`` or ``implied by gap G`` (for tables)."""
        return self.method if self.implied_by is None else f"implied by gap {self.implied_by}"

    @classmethod
    def from_dict(cls, data: Mapping) -> RegimeCell:
        """The cell :meth:`to_dict` wrote (missing keys read as None)."""
        fields: dict[str, Any] = {k: data.get(k) for k in cls.__dataclass_fields__}
        return cls(**fields)


@dataclass(frozen=True)
class Boundary:
    """Fit of the critical gap against n: ``gap_c = prefactor * n**exponent``.

    Attributes
    ----------
    exponent : float or None
        The log-log least-squares slope; None when fewer than
        :data:`MIN_BRACKETED` n have a crossing inside the gap range.
    low, high : float or None
        95% bootstrap confidence interval of the exponent: the sampled cells'
        counts redrawn from Binomial(runs, p) and the fit repeated (percentile
        interval). It covers the sampling error of the runs; exact cells carry
        none, so a map of exact cells only has no interval (None).
    prefactor : float or None
    critical_gaps : tuple of (int, float)
        (n, interpolated critical gap) for every n with a crossing.
    grid_low, grid_high : float or None
        Grid resolution, not a confidence interval: the least and greatest
        slope with every critical gap anywhere between the two grid gaps
        around its crossing.
    note : str
        Why there is no exponent (empty when there is one).
    """

    exponent: float | None
    low: float | None
    high: float | None
    prefactor: float | None
    critical_gaps: tuple = ()
    grid_low: float | None = None
    grid_high: float | None = None
    note: str = ""

    def to_dict(self) -> dict:
        """The boundary as its JSON object."""
        return {"estimate": self.exponent, "low": self.low, "high": self.high,
                "interval": None if self.low is None else INTERVAL_NAME,
                "grid_low": self.grid_low, "grid_high": self.grid_high,
                "prefactor": self.prefactor, "bracketed": len(self.critical_gaps),
                "note": self.note or None,
                "critical_gaps": [{"n": n, "gap": g} for n, g in self.critical_gaps]}

    def describe(self, digits: int = 2) -> str:
        """One line: the exponent with what its interval is, or why there is none."""
        if self.exponent is None:
            return self.note or f"no exponent (fewer than {MIN_BRACKETED} n with a crossing)"
        f = f".{digits}f"
        text = f"critical gap ~ n^{self.exponent:{f}}"
        if self.low is not None:
            text += f" ({INTERVAL_NAME} {self.low:{f}} .. {self.high:{f}})"
        else:
            text += " (exact cells: no sampling error)"
        if self.grid_low is not None:
            text += f"; grid resolution allows {self.grid_low:{f}} .. {self.grid_high:{f}}"
        return text


@dataclass(frozen=True)
class RegimeMap:
    """A finished sweep: cells in grid order, the fitted boundary, and what produced them."""

    cells: tuple[RegimeCell, ...]
    boundary: Boundary
    risk: float
    time_factor: float
    seed_entropy: int
    skipped: tuple = field(default=())
    #: Requested gap fractions that rounded to one gap (see :func:`merged_fractions`).
    merged: tuple = field(default=())

    def table(self) -> list[dict]:
        """The cells as dictionaries (the CSV/JSON rows)."""
        return [c.to_dict() for c in self.cells]


def risk_flag(low: float, high: float, risk: float) -> str:
    """``misleading`` when ``low > risk``, ``ok`` when ``high < risk``, else ``uncertain``."""
    if low > risk:
        return "misleading"
    if high < risk:
        return "ok"
    return "uncertain"


def time_flag(ssa_median: float | None, ode_time: float | None, factor: float, *,
              censored_at: float | None = None) -> str:
    """Compare the stochastic median consensus time with the ODE's, by ``factor``.

    Parameters
    ----------
    ssa_median, ode_time : float or None
    factor : float
    censored_at : float, optional
        The horizon, when the median is censored (more than half the runs
        have no consensus by it, ``ssa_median`` None): the median then exceeds
        it, so it is ``slower`` when ``censored_at >= factor * ode_time``.
    """
    if ode_time is None or ode_time <= 0:
        return "unknown"
    if ssa_median is None:
        if censored_at is not None and censored_at >= factor * ode_time:
            return "slower"
        return "unknown"
    if ssa_median > factor * ode_time:
        return "slower"
    if ssa_median * factor < ode_time:
        return "faster"
    return "ok"


def plan_cells(ns: Sequence[int], gaps: Sequence[int] | None = None,
               gap_fractions: Sequence[float] | None = None
               ) -> tuple[list[tuple[int, int]], list[tuple[int, int]]]:
    """The (n, gap) cells of a sweep, in order, and the cells skipped.

    Parameters
    ----------
    ns : sequence of int
    gaps : sequence of int, optional
        Absolute gaps. A cell whose gap differs from n in parity (so that
        ``(n + gap) / 2`` is not whole) or exceeds n is skipped.
    gap_fractions : sequence of float, optional
        Gaps as fractions of n, rounded per :func:`crn.analyses.probes.gap_for_fraction`
        (nearest whole gap of n's parity); duplicates after rounding are kept once
        (:func:`merged_fractions` lists them, and the map reports them).

    Returns
    -------
    cells : list of (int, int)
    skipped : list of (int, int)

    Raises
    ------
    CRNError
        Unless exactly one of ``gaps`` and ``gap_fractions`` is given, or for
        empty lists or non-positive n.
    """
    if (gaps is None) == (gap_fractions is None):
        raise CRNError("give exactly one of gaps and gap fractions")
    ns = [int(n) for n in ns]
    if not ns or any(n < 2 for n in ns):
        raise CRNError(f"n values must be whole numbers >= 2, got {ns}")
    cells, skipped = [], []
    for n in ns:
        if gaps is not None:
            if not gaps:
                raise CRNError("the gap list is empty")
            for g in gaps:
                g = int(g)
                if g < 0:
                    raise CRNError(f"gaps must be >= 0, got {g}")
                if g > n or (n - g) % 2:
                    skipped.append((n, g))
                elif (n, g) not in cells:
                    cells.append((n, g))
        else:
            if not gap_fractions:
                raise CRNError("the gap-fraction list is empty")
            for f in gap_fractions:
                cell = (n, gap_for_fraction(n, float(f)))
                if cell not in cells:
                    cells.append(cell)
    return cells, skipped


def _disagrees(labels, ode_label) -> np.ndarray:
    return np.array([label != ode_label for label in labels], dtype=bool)


def _median_time(times: np.ndarray) -> float | None:
    if times.size == 0:
        return None
    t = np.where(np.isfinite(times), times, np.inf)
    median = float(np.median(t))
    return median if math.isfinite(median) else None


def evaluate_cell(networks: Callable[[int, int], Network], n: int, gap: int, *,
                  risk: float = 0.01, until: float | None = None, runs_max: int = 1000,
                  time_factor: float = 2.0, method: str = "auto",
                  exact_max: int = DEFAULT_EXACT_MAX, entropy: int | np.random.SeedSequence = 0,
                  cluster: str | None = None,
                  timing_runs: int = _TIMING_RUNS) -> RegimeCell:
    """Compute one cell of a regime map.

    Parameters
    ----------
    networks : callable (n, gap) -> Network
        Builds the cell's network (see :class:`crn.analyses.probes.InitialSplit`).
    n, gap : int
    risk : float
    until : float, optional
        Horizon of the ODE and of the runs; by default 10 times the ODE's
        consensus time (``100 (1 + ln n)`` when the ODE has none).
    runs_max : int
        Most stochastic runs; rounds of 50, 50, 100, 200, ... (doubling, see
        :func:`crn.analyses.probes.sample_until_decided`) are added until the 95%
        interval simultaneous over the sequential looks lies wholly above or
        below ``risk`` (at risk 0.01 a cell with no disagreeing run is ``ok``
        after 400 runs). Protocol cells from :data:`BATCHED_FROM` agents run on
        the batched engine.
    time_factor : float
    method : {"auto", "exact", "stochastic"}
        ``auto``: exact when at most ``exact_max`` configurations, else
        stochastic. Exact cells solve the absorption problem
        (:func:`crn.solvers.exact.exact_outcomes`) and bound consensus after the
        horizon with Cantelli's inequality (transient analysis to a horizon
        of ten ODE times is far slower); their median time comes from
        ``timing_runs`` stochastic runs.
    exact_max : int
    entropy : int or SeedSequence
        Root seed entropy (or a SeedSequence child); the cell draws from the
        child stream keyed (n, gap, round) below it.
    cluster : optional
        A dask scheduler address or client passed to :func:`crn.solvers.simulate.simulate`.
    timing_runs : int
        Stochastic runs used for the median time in exact cells.

    Returns
    -------
    RegimeCell
    """
    from crn.analyses.probes import cell_seed

    if method not in ("auto", "exact", "stochastic"):
        raise CRNError(f"method must be auto, exact or stochastic, got {method!r}")
    net = networks(int(n), int(gap))
    truth = correct_label(net)
    ode_label, ode_time, horizon = _mean_field(net, n, until)
    use_exact = _solved_exactly(net, method, exact_max)
    if use_exact:
        # eventual outcome exactly; consensus after the horizon bounded by Cantelli's inequality
        probabilities, mean, std = exact_absorption(net)
        late = late_consensus_bound(probabilities, mean, std, horizon, label=ode_label)
        if ode_label is None:
            # a run agrees with "none" unless it reaches consensus by the horizon
            high = p = min(max(1.0 - probabilities.get("none", 0.0), 0.0), 1.0)
            low = max(0.0, high - late)
        else:
            low = p = min(max(1.0 - probabilities.get(ode_label, 0.0), 0.0), 1.0)
            high = min(1.0, low + late)
        wrong = runs = 0
        _, times = stochastic_decisions(net, timing_runs, horizon, cell_seed(entropy, n, gap, 0),
                                        cluster=cluster)
    else:
        store = {"disagree": np.zeros(0, dtype=bool), "times": np.zeros(0)}

        engine = _engine(net, n)

        def draw(round_index, size):
            labels, t = stochastic_decisions(net, size, horizon,
                                             cell_seed(entropy, n, gap, round_index),
                                             cluster=cluster, engine=engine)
            store["disagree"] = np.concatenate([store["disagree"], _disagrees(labels, ode_label)])
            store["times"] = np.concatenate([store["times"], t])

        estimate = sample_until_decided(
            lambda: (int(store["disagree"].sum()), int(store["disagree"].size)), draw, risk,
            runs_max, first=FIRST_ROUND, favour="below")
        p, low, high = estimate.p, estimate.low, estimate.high
        wrong, runs, times = estimate.successes, estimate.trials, store["times"]
    median = _median_time(times)
    # more than half the runs without consensus by the horizon: the median lies beyond it
    censored = horizon if times.size and median is None else None
    return RegimeCell(
        n=int(n), gap=int(gap), ode_label=ode_label,
        ode_time=None if ode_time is None else float(ode_time),
        p_wrong=float(p), low=float(low), high=float(high), wrong=wrong, runs=runs,
        flag=risk_flag(low, high, risk),
        time_flag=time_flag(median, ode_time, time_factor, censored_at=censored),
        ssa_median_time=median,
        method="exact" if use_exact else "stochastic", horizon=float(horizon),
        correct_label=truth,
    )


def _mean_field(net: Network, n: int, until: float | None):
    """The ODE's label and consensus time, and the cell's horizon."""
    ode_until = float(until) if until is not None else 1e4 * (1 + math.log(n))
    ode_label, ode_time = ode_decision(net, ode_until)
    if until is not None:
        horizon = float(until)
    elif ode_time is not None:
        horizon = _HORIZON_FACTOR * max(ode_time, 1.0)
    else:
        horizon = 100.0 * (1 + math.log(n))
    return ode_label, ode_time, horizon


def _solved_exactly(net: Network, method: str, exact_max: int) -> bool:
    return method == "exact" or (method == "auto" and configurations(net) <= exact_max)


def _engine(net: Network, n: int) -> str:
    return "batched" if net.from_protocol and n >= BATCHED_FROM else "auto"


def implied_cell(networks: Callable[[int, int], Network], n: int, gap: int,
                 decider: RegimeCell, *, risk: float = 0.01, until: float | None = None,
                 time_factor: float = 2.0, method: str = "auto",
                 exact_max: int = DEFAULT_EXACT_MAX,
                 entropy: int | np.random.SeedSequence = 0, cluster: str | None = None,
                 **unused: Any) -> RegimeCell | None:
    """A cell that inherits an ``ok`` cell's bound by a monotone coupling, or None.

    Applies when ``decider`` (same n) is ``ok`` and was sampled itself, the
    cell would be sampled too, both ODE labels are the same label L, the
    protocol is monotone towards L and this cell's start dominates the
    decider's (:func:`crn.analyses.monotone.implies`). Then the probability
    of not settling first on L by the decider's horizon is at most the
    decider's, so its upper bound ``high`` holds here, at the same confidence.
    The cell runs only the first round (:data:`crn.analyses.probes.FIRST_ROUND`
    runs, the same stream a full cell starts with) for its estimate, lower
    bound and median time. Options as for :func:`evaluate_cell`.

    Returns
    -------
    RegimeCell or None
        None when the conditions do not hold (compute the cell in full).
    """
    from crn.analyses.monotone import implies
    from crn.analyses.probes import cell_seed, sided_interval

    if (decider.flag != "ok" or decider.implied_by is not None or decider.ode_label is None
            or decider.method == "exact" or decider.n != n):
        return None
    net = networks(int(n), int(gap))
    if _solved_exactly(net, method, exact_max):
        return None
    ode_label, ode_time, _ = _mean_field(net, n, until)
    if ode_label != decider.ode_label:
        return None
    if implies(networks(int(n), int(decider.gap)), net, ode_label) is None:
        return None
    horizon = decider.horizon
    labels, times = stochastic_decisions(net, FIRST_ROUND, horizon,
                                         cell_seed(entropy, n, gap, 0), cluster=cluster,
                                         engine=_engine(net, n))
    wrong = int(_disagrees(labels, ode_label).sum())
    p, low, _ = sided_interval(wrong, len(labels), 0.025, 0.025)
    median = _median_time(times)
    censored = horizon if times.size and median is None else None
    return RegimeCell(
        n=int(n), gap=int(gap), ode_label=ode_label,
        ode_time=None if ode_time is None else float(ode_time),
        p_wrong=float(p), low=float(low), high=float(decider.high), wrong=wrong,
        runs=len(labels), flag=risk_flag(low, decider.high, risk),
        time_flag=time_flag(median, ode_time, time_factor, censored_at=censored),
        ssa_median_time=median, method="stochastic", horizon=float(horizon),
        correct_label=correct_label(net), implied_by=int(decider.gap),
    )


def _cell_task(args):
    networks, n, gap, options = args
    return evaluate_cell(networks, n, gap, **options)


def _row_task(args):
    """The cells of one n in increasing gap: after the first sampled ``ok`` cell, implied ones."""
    networks, n, gaps, options, done = args
    decider = next((c for g, c in sorted(done.items())
                    if c.flag == "ok" and c.implied_by is None and c.ode_label is not None), None)
    new = []
    for g in sorted(gaps):
        if g in done:
            continue
        cell = None if decider is None else implied_cell(networks, n, g, decider, **options)
        if cell is None:
            cell = evaluate_cell(networks, n, g, **options)
        new.append(cell)
        if decider is None and cell.flag == "ok" and cell.ode_label is not None:
            decider = cell
    return new


def _monotone_protocol(networks: Callable[[int, int], Network], cell: tuple[int, int]) -> bool:
    """Whether the first cell's protocol is monotone towards some label (rows may imply cells)."""
    from crn.analyses.monotone import monotone_order

    net = networks(*cell)
    return net.from_protocol and any(monotone_order(net, label) for label in net.labels)


def regime_map(networks: Callable[[int, int], Network], ns: Sequence[int], *,
               gaps: Sequence[int] | None = None, gap_fractions: Sequence[float] | None = None,
               risk: float = 0.01, until: float | None = None, runs_max: int = 1000,
               time_factor: float = 2.0, method: str = "auto",
               exact_max: int = DEFAULT_EXACT_MAX, rng: SeedLike = None,
               workers: int | None = None, cluster: str | None = None, done: Mapping | None = None,
               on_cell: Callable[[RegimeCell], None] | None = None,
               progress: Callable | None = None, monotone: bool = True) -> RegimeMap:
    """Sweep n and the gap; flag where the mean field misleads; fit the boundary.

    Parameters
    ----------
    networks : callable (n, gap) -> Network
        Picklable when ``workers > 1`` (:class:`crn.analyses.probes.InitialSplit`,
        :class:`crn.analyses.probes.ModelParameters`).
    ns : sequence of int
    gaps, gap_fractions : sequence, optional
        Exactly one; see :func:`plan_cells`.
    risk : float, default 0.01
    until : float, optional
        Horizon (see :func:`evaluate_cell`).
    runs_max : int, default 1000
    time_factor : float, default 2
    method : {"auto", "exact", "stochastic"}
    exact_max : int
    rng : int, SeedSequence or None
        Root seed. Each cell draws from its own child stream keyed by
        (n, gap, round), so the numbers do not depend on the order cells are
        computed, the number of workers, or an interruption and resume.
    workers : int, optional
        Processes computing cells in parallel (default 1).
    cluster : optional
        Dask scheduler: stochastic runs go there (cells computed in turn).
    done : mapping of (n, gap) to RegimeCell, optional
        Cells already finished (resume): not recomputed.
    on_cell : callable, optional
        Called with each newly finished cell, in the calling process, as it
        finishes (to append it to a results file).
    progress : callable (done, total), optional
    monotone : bool, default True
        When the protocol is monotone (:mod:`crn.analyses.monotone`), compute
        each n's cells in increasing gap and let a cell whose start dominates a
        sampled ``ok`` cell's inherit its bound (:func:`implied_cell`): same
        flags at a fraction of the runs. False samples every cell in full.

    Returns
    -------
    RegimeMap

    References
    ----------
    Angluin, Aspnes, Eisenstat, Distributed Computing 21(2), 2008, and Condon,
    Hajiaghayi, Kirkpatrick, Manuch, Natural Computing 2020: for approximate
    majority the critical gap grows like sqrt(n) up to log factors.

    Examples
    --------
    >>> from crn.analyses.probes import InitialSplit
    >>> from crn.io.models import load_model
    >>> net = load_model("models/approximate_majority.toml").network
    >>> result = regime_map(InitialSplit(net), [40], gaps=[2, 8], method="exact", rng=1)
    >>> [(cell.n, cell.gap, cell.ode_label, round(cell.p_wrong, 4)) for cell in result.cells]
    [(40, 2, 'X', 0.3746), (40, 8, 'X', 0.0998)]
    """
    if not 0 < risk < 1:
        raise CRNError(f"risk must lie in (0, 1), got {risk}")
    if time_factor <= 1:
        raise CRNError(f"time factor must exceed 1, got {time_factor}")
    if runs_max < 1:
        raise CRNError(f"runs_max must be >= 1, got {runs_max}")
    if until is not None and not until > 0:
        raise CRNError(f"until must be positive, got {until}")
    seq = root_seed(rng)
    entropy = int(cast(int, seq.entropy))
    stream = seq if seq.spawn_key else entropy
    cells, skipped = plan_cells(ns, gaps, gap_fractions)
    finished = {tuple(k): v for k, v in (done or {}).items()}
    todo = [c for c in cells if c not in finished]
    options: dict[str, Any] = dict(risk=risk, until=until, runs_max=int(runs_max),
                                   time_factor=time_factor, method=method, exact_max=exact_max,
                                   entropy=stream, cluster=cluster)
    total, count = len(cells), len(cells) - len(todo)
    if progress:
        progress(count, total)

    def finish(cell):
        nonlocal count
        finished[(cell.n, cell.gap)] = cell
        count += 1
        if on_cell:
            on_cell(cell)
        if progress:
            progress(count, total)

    # cells run on local processes; with a cluster they run here and send their runs there.
    # The costliest cells (largest n) first, so no worker idles at the end. For a monotone
    # protocol a task is a whole n (its cells in increasing gap), so cells can be implied.
    by_row = monotone and bool(todo) and _monotone_protocol(networks, todo[0])
    tasks: list[tuple]
    if by_row:
        row_ns = sorted({n for n, _ in todo}, key=lambda n: -n)
        tasks = [(networks, n, [g for m, g in todo if m == n], options,
                  {g: finished[(m, g)] for m, g in finished if m == n}) for n in row_ns]
        task, noun = _row_task, "rows"
    else:
        ordered = sorted(todo, key=lambda c: -c[0]) if workers and workers > 1 else todo
        tasks = [(networks, n, g, options) for n, g in ordered]
        task, noun = _cell_task, "cells"

    def keep(_, result):
        for cell in result if by_row else [result]:
            finish(cell)

    with Executor((workers or 1) if cluster is None else 1, context=None) as executor:
        executor.run(task, tasks, keep, noun=noun)
    ordered_cells = tuple(finished[c] for c in cells)
    return RegimeMap(cells=ordered_cells, boundary=fit_boundary(ordered_cells, risk, rng=entropy),
                     risk=float(risk), time_factor=float(time_factor), seed_entropy=entropy,
                     skipped=tuple(skipped),
                     merged=tuple(merged_fractions(ns, gap_fractions or ()) if gaps is None
                                  else ()))


def _critical_gap(rows, risk):
    """Interpolated gap where p crosses the risk, scanning down from the largest gap."""
    rows = sorted(rows)
    for i in range(len(rows) - 1, 0, -1):
        g1, p1 = rows[i - 1]
        g2, p2 = rows[i]
        if i == len(rows) - 1 and p2 > risk:
            return None  # even the largest gap misleads: the crossing lies beyond the grid
        if p1 > risk >= p2:
            t = (math.log(p1) - math.log(risk)) / (math.log(p1) - math.log(p2))
            return math.exp(math.log(g1) + t * (math.log(g2) - math.log(g1)))
    return None


def _floor(cell: RegimeCell, p: float) -> float:
    # log space needs p > 0: half a run for sampled cells, a tiny value for exact ones
    return max(p, 0.5 / cell.runs if cell.runs else 1e-12)


def _critical_gaps(cells, risk, probabilities):
    by_n: dict[int, list] = {}
    for cell, p in zip(cells, probabilities, strict=True):
        if cell.gap > 0:
            by_n.setdefault(cell.n, []).append((cell.gap, _floor(cell, p)))
    out = []
    for n in sorted(by_n):
        g = _critical_gap(by_n[n], risk)
        if g is not None:
            out.append((n, g))
    return out


def _critical_gaps_many(cells, risk, probabilities):
    """:func:`_critical_gaps` for many probability vectors at once.

    ``probabilities`` has shape (replicates, cells); returns the sorted n and
    the log critical gaps, shape (replicates, len(ns)), NaN where no crossing.
    """
    floors = np.array([0.5 / c.runs if c.runs else 1e-12 for c in cells])
    p = np.maximum(probabilities, floors)
    ns = sorted({c.n for c in cells if c.gap > 0})
    out = np.full((p.shape[0], len(ns)), np.nan)
    for j, n in enumerate(ns):
        idx = sorted((c.gap, i) for i, c in enumerate(cells) if c.n == n and c.gap > 0)
        if len(idx) < 2:
            continue
        g = np.log([gap for gap, _ in idx])
        lp = np.log(p[:, [i for _, i in idx]])
        lr = math.log(risk)
        cross = (lp[:, :-1] > lr) & (lp[:, 1:] <= lr)  # crossing between columns i and i+1
        last = cross.shape[1] - 1 - np.argmax(cross[:, ::-1], axis=1)  # the uppermost one
        ok = cross.any(axis=1) & (lp[:, -1] <= lr)
        rows = np.nonzero(ok)[0]
        i = last[rows]
        lp1, lp2 = lp[rows, i], lp[rows, i + 1]
        t = (lp1 - lr) / (lp1 - lp2)
        out[rows, j] = g[i] + t * (g[i + 1] - g[i])
    return np.array(ns, dtype=float), out


def _brackets(cells, risk, probabilities):
    """(n, lower, upper) grid gaps around each crossing: the crossing lies between them."""
    by_n: dict[int, list] = {}
    for cell, p in zip(cells, probabilities, strict=True):
        if cell.gap > 0:
            by_n.setdefault(cell.n, []).append((cell.gap, p))
    out = {}
    for n, rows in by_n.items():
        rows.sort()
        for i in range(len(rows) - 1, 0, -1):
            if rows[i - 1][1] > risk >= rows[i][1]:
                out[n] = (rows[i - 1][0], rows[i][0])
                break
    return out


def _extreme_slopes(points, brackets):
    """Least and greatest least-squares slope with each log gap anywhere in its bracket."""
    x = np.log([n for n, _ in points])
    weights = (x - x.mean()) / ((x - x.mean()) ** 2).sum()
    lower = np.log([brackets[n][0] for n, _ in points])
    upper = np.log([brackets[n][1] for n, _ in points])
    high = float(np.where(weights > 0, upper, lower) @ weights)
    low = float(np.where(weights > 0, lower, upper) @ weights)
    return low, high


def _slope(points):
    x = np.log([n for n, _ in points])
    y = np.log([g for _, g in points])
    slope, intercept = np.polyfit(x, y, 1)
    return float(slope), float(intercept), x, y


def _bootstrap_slopes(cells, risk, generator, replicates):
    """Least-squares slopes of the boundary refitted on redrawn counts of the sampled cells.

    Replicates with fewer than :data:`MIN_BRACKETED` crossings are left out.
    """
    runs = np.array([c.runs for c in cells])
    p_hat = np.array([c.p_wrong for c in cells])
    sampled = runs > 0
    k = generator.binomial(np.maximum(runs, 1), np.where(sampled, p_hat, 0.0),
                           size=(int(replicates), len(cells)))
    p_star = np.where(sampled, k / np.maximum(runs, 1), p_hat)
    ns, logg = _critical_gaps_many(cells, risk, p_star)
    have = np.isfinite(logg)
    enough = have.sum(axis=1) >= MIN_BRACKETED
    x = np.log(ns)[None, :]
    w = have[enough].astype(float)
    y = np.where(have[enough], logg[enough], 0.0)
    count = w.sum(axis=1, keepdims=True)
    xm = (w * x).sum(axis=1, keepdims=True) / count
    ym = (w * y).sum(axis=1, keepdims=True) / count
    return ((w * (x - xm) * (y - ym)).sum(axis=1) / (w * (x - xm) ** 2).sum(axis=1))


def fit_boundary(cells: Sequence[RegimeCell], risk: float, *, rng: SeedLike = None,
                 replicates: int = 2000) -> Boundary:
    """Fit ``log gap_c = log a + b log n`` over the n that have a crossing.

    For each n the critical gap is where the disagreement probability crosses
    ``risk``, interpolated linearly between neighbouring gaps in
    (log gap, log p). With fewer than :data:`MIN_BRACKETED` such n there is
    no exponent (the boundary's ``note`` says why). The exponent's interval is
    a 95% parametric-bootstrap percentile confidence interval (Efron,
    Tibshirani, An Introduction to the Bootstrap, Chapman & Hall 1993: the
    parametric bootstrap and the percentile interval): each sampled cell's
    count is redrawn from Binomial(runs, p) and the boundary refitted; exact
    cells are held fixed, so a map of exact cells only has no interval. The
    redraw keeps each cell's final run count (the sequential stopping is not
    replayed); with about ten disagreeing runs per cell near the crossing
    the interval is slightly conservative (it covered a known exponent in
    about 98% of synthetic maps, see tests/test_regimes.py). Separately,
    ``grid_low``/``grid_high`` give the grid's resolution: the least and
    greatest slope with every critical gap anywhere between the two grid gaps
    around its crossing (a bound on what interpolation can hide, not a
    confidence interval).

    Parameters
    ----------
    cells : sequence of RegimeCell
    risk : float
    rng : int, SeedSequence or None
        Seed of the bootstrap.
    replicates : int

    Returns
    -------
    Boundary
    """
    cells = list(cells)
    base = _critical_gaps(cells, risk, [c.p_wrong for c in cells])
    if len({n for n, _ in base}) < MIN_BRACKETED:
        note = (f"too few n with a crossing inside the gap range to fit an exponent "
                f"({len(base)}; at least {MIN_BRACKETED} needed)")
        return Boundary(None, None, None, None, tuple(base), note=note)
    slope, intercept, _x, _y = _slope(base)
    low = high = None
    crossing_ns = {n for n, _ in base}
    if any(c.runs > 0 and c.n in crossing_ns for c in cells):
        slopes = _bootstrap_slopes(cells, risk, np.random.default_rng(rng), replicates)
        if slopes.size:
            low, high = (float(v) for v in np.quantile(slopes, [0.025, 0.975]))
    grid_low = grid_high = None
    brackets = _brackets(cells, risk, [c.p_wrong for c in cells])
    if all(n in brackets for n, _ in base):
        grid_low, grid_high = _extreme_slopes(base, brackets)
    return Boundary(slope, low, high, float(math.exp(intercept)), tuple(base),
                    grid_low=grid_low, grid_high=grid_high)


def merged_fractions(ns: Sequence[int], gap_fractions: Sequence[float]) -> list[dict]:
    """Requested gap fractions that round to the same gap at some n (one cell computed).

    Parameters
    ----------
    ns : sequence of int
    gap_fractions : sequence of float

    Returns
    -------
    list of dict
        ``{n, gap, gap_fractions}`` for each cell that stands for two or more
        requested fractions, in grid order.
    """
    out: list[dict] = []
    for n in ns:
        by_gap: dict[int, list] = {}
        for f in gap_fractions:
            by_gap.setdefault(gap_for_fraction(int(n), float(f)), []).append(float(f))
        out.extend({"n": int(n), "gap": g, "gap_fractions": fs}
                   for g, fs in by_gap.items() if len(set(fs)) > 1)
    return out
