"""Copy numbers: the smallest population that decides correctly, by a deadline, at a given risk.

The population n runs over a lattice on which the requested gap is exact
(``gap = F n`` with n and gap of equal parity, or a fixed gap G with
``n = G + 2, G + 4, ...``). At each probed n the probability of correct
consensus by the deadline comes from exact analysis where the state space is
small and from seeded stochastic runs otherwise (added in rounds until the 95%
interval simultaneous over the sequential looks, Clopper-Pearson with a
Bonferroni correction, lies wholly above or below the target, or ``runs_max``
is spent). Bracketing by doubling and bisection then find the answer, on the
safe side: the smallest n whose interval lies wholly above ``1 - risk`` (the
upper bound on the risk lies below it), with the n one lattice step below
probed and not qualifying; and the smallest n that could meet it (low).

With Poisson loading (a droplet assay) n and the gap are the means of each
droplet's contents and the probability is integrated over the loading
(:mod:`crn.core.loading`), split into the part due to droplets whose counts
reversed or tied the gap and the part due to the kinetics.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from fractions import Fraction
from typing import TYPE_CHECKING, cast

import numpy as np

from crn.analyses.probes import (
    FIRST_ROUND,
    GAP_FRACTION_RANGE,
    cell_seed,
    configurations,
    exact_absorption,
    exact_decision,
    late_consensus_bound,
    ode_decision,
    sample_until_decided,
    stochastic_decisions,
)
from crn.core.errors import CRNError
from crn.core.loading import (
    LOADINGS,
    draw_droplets,
    droplet_network,
    loading_grid,
    reversal_probability,
    split_decisions,
)
from crn.core.network import Network
from crn.core.outcome import correct_label
from crn.core.units import concentration_for, to_parallel_time, to_seconds, volume_for
from crn.runtime.seeds import root_seed

if TYPE_CHECKING:
    from crn.core.types import SeedLike

__all__ = ["Probe", "CopiesResult", "Prober", "Lattice", "lattice", "smallest_n",
           "physical_outputs", "physical_answer", "p_wrong_summary", "risk_parts",
           "parallel_deadline"]

_TIMING_RUNS = 200


@dataclass(frozen=True)
class Probe:
    """P(correct consensus by the deadline) at one n.

    Attributes
    ----------
    n, gap : int
    p, low, high : float
        Estimate and 95% interval (for runs: simultaneous over the sequential
        looks, Clopper-Pearson with a Bonferroni correction, see
        :func:`crn.analyses.probes.sample_until_decided`; for exact analysis
        ``low == high == p``, or the eventual probability less a Cantelli
        bound on consensus after the deadline).
    successes, trials : int
        Runs deciding correctly by the deadline, runs (0, 0 when exact).
    method : str
        ``exact``, ``exact-bound`` or ``stochastic``.
    deadline : float or None
        At the mean loading (parallel time).
    loading : str
        ``fixed`` (every droplet holds exactly n) or ``poisson`` (n is the
        mean; each input's count is Poisson, see :mod:`crn.core.loading`).
    reversal : float or None
        Poisson loading: probability that a droplet's minority count reaches
        or passes its majority count (the sign of the gap reversed or zeroed;
        exact, the Skellam distribution).
    wrong_loading, wrong_kinetics : float or None
        Poisson loading: P(no correct decision) split into droplets whose
        counts were reversed or tied (loading) and droplets that held the
        right majority (kinetics). Exact probes: they add up to ``1 - p``.
        Sampled probes: ``reversal`` (or ``1 - reversal``) times the share of
        wrong runs among the droplets drawn reversed (or not), which adds up
        to about ``1 - p``; with no reversed droplet drawn the loading part is
        ``reversal`` itself, an upper bound.
    """

    n: int
    gap: int
    p: float
    low: float
    high: float
    successes: int
    trials: int
    method: str
    deadline: float | None
    loading: str = "fixed"
    reversal: float | None = None
    wrong_loading: float | None = None
    wrong_kinetics: float | None = None

    @property
    def p_wrong(self) -> tuple[float, float, float]:
        """P(no correct decision by the deadline) and its interval: ``1 - p, 1 - high, 1 - low``."""
        return 1.0 - self.p, 1.0 - self.high, 1.0 - self.low


@dataclass(frozen=True)
class Lattice:
    """Populations ``n_k = first + step * k`` (k >= 0) and their gaps."""

    first: int
    step: int
    fraction: Fraction | None
    gap: int | None

    def n(self, k: int) -> int:
        """Population at lattice index ``k``."""
        return self.first + self.step * int(k)

    def gap_of(self, n: int) -> int:
        """Input gap at population ``n`` (a fixed gap or a fraction of n)."""
        if self.fraction is not None:
            return int(self.fraction * n)
        return int(cast(int, self.gap))


def lattice(gap_fraction: float | None = None, gap: int | None = None) -> Lattice:
    """The populations on which the gap is exact.

    For a fraction F = p/q in lowest terms, ``n = q t`` gives ``gap = p t``;
    n and gap share parity when ``t (q - p)`` is even, so the step is q when
    ``q - p`` is even and 2q otherwise. For a fixed gap G, ``n = G + 2k``
    with at least one minority agent.

    Raises
    ------
    CRNError
        Unless exactly one of the two is given, F lies in (0, 1) and G >= 1
        (a gap of 0 is a tie, with no majority to find).
    """
    if (gap_fraction is None) == (gap is None):
        raise CRNError("give exactly one of gap fraction and gap")
    if gap_fraction is not None:
        if not 0 < gap_fraction < 1:
            raise CRNError(f"{GAP_FRACTION_RANGE}, got {gap_fraction}")
        f = Fraction(gap_fraction).limit_denominator(1_000_000)
        if abs(float(f) - gap_fraction) > 1e-9 * gap_fraction:
            raise CRNError(f"gap fraction {gap_fraction} is not a ratio of small whole numbers")
        step = f.denominator * (1 if (f.denominator - f.numerator) % 2 == 0 else 2)
        return Lattice(first=step, step=step, fraction=f, gap=None)
    if gap is None or int(gap) != gap or gap < 1:
        raise CRNError(f"--gap must be a whole number >= 1 (a tie has no majority to find), "
                       f"got {gap}")
    return Lattice(first=int(gap) + 2, step=2, fraction=None, gap=int(gap))


class Prober:
    """Evaluate P(correct consensus by the deadline) at populations n, caching what it ran.

    Stochastic runs are stored per n (labels and first-consensus times up to
    ``horizon``), so several deadlines (one per concentration, say) reuse them.

    Parameters
    ----------
    networks : callable (n, gap) -> Network
    horizon : float, optional
        Horizon of the stochastic runs; must cover every deadline asked.
        Default: the deadline, or without one 10 times the ODE consensus time.
    method : {"auto", "exact", "stochastic"}
    exact_max : int
        Largest configuration count solved by absorption (no deadline, or a
        deadline checked with Cantelli's bound).
    transient_max : int
        Largest configuration count solved by transient analysis at the deadline.
    runs_max : int
    rng : int, SeedSequence or None
        Root seed; probe n, round r draws from the child stream keyed (n, gap, r).
    workers, cluster :
        Passed to :func:`crn.solvers.simulate.simulate`.
    loading : {"fixed", "poisson"}
        ``fixed``: n molecules, split exactly by the gap. ``poisson``: n and
        the gap are the means of a droplet's loading; the probability is
        integrated over it, exactly (every relevant split solved, see
        :func:`crn.core.loading.split_decisions`) while the configurations summed
        over the relevant totals stay within ``loading_exact_max``, else by
        sampling one droplet per run.
    scale_deadline : bool
        Poisson loading: the deadline is a physical time, so in parallel time
        it scales with each droplet's own total (its concentration).
    loading_exact_max : int
        Largest cost of an exact Poisson-loading probe: configurations summed
        over the relevant totals, times about ``total x deadline / 10`` with a
        deadline (the work of the matrix exponential). Above it, sampling.
    """

    def __init__(self, networks: Callable[[int, int], Network], *, horizon: float | None = None,
                 method: str = "auto", exact_max: int = 100_000, transient_max: int = 10_000,
                 runs_max: int = 4000, rng: SeedLike = None, workers: int = 1,
                 cluster: str | None = None, loading: str = "fixed", scale_deadline: bool = False,
                 loading_exact_max: int = 300_000):
        if method not in ("auto", "exact", "stochastic"):
            raise CRNError(f"method must be auto, exact or stochastic, got {method!r}")
        if loading not in LOADINGS:
            raise CRNError(f"loading must be one of {', '.join(LOADINGS)}, got {loading!r}")
        self.loading = loading
        self.scale_deadline = bool(scale_deadline)
        self.loading_exact_max = int(loading_exact_max)
        seq = root_seed(rng)
        self.entropy = int(cast(int, seq.entropy))
        self._stream = seq if seq.spawn_key else self.entropy
        self.networks = networks
        self.horizon = horizon
        self.method = method
        self.exact_max = int(exact_max)
        self.transient_max = int(transient_max)
        self.runs_max = int(runs_max)
        self.workers = workers
        self.cluster = cluster
        self._runs: dict[tuple, dict] = {}
        self._exact: dict[tuple, Probe] = {}
        self._nets: dict[tuple, Network] = {}

    def network(self, n: int, gap: int) -> Network:
        """The network of cell ``(n, gap)``, built once."""
        key = (int(n), int(gap))
        if key not in self._nets:
            self._nets[key] = self.networks(*key)
        return self._nets[key]

    def _horizon(self, net: Network, deadline: float | None) -> float:
        if self.horizon is not None:
            if deadline is not None and deadline > self.horizon * (1 + 1e-12):
                raise CRNError(f"deadline {deadline} exceeds the runs' horizon {self.horizon}")
            return float(self.horizon)
        if deadline is not None:
            return float(deadline)
        _, ode_time = ode_decision(net, 1e4 * (1 + math.log(max(net.population, 2))))
        return 10.0 * max(ode_time, 1.0) if ode_time is not None else \
            100.0 * (1 + math.log(max(net.population, 2)))

    def _use_exact(self, net: Network, deadline) -> str | None:
        if self.method == "stochastic":
            return None
        size = configurations(net)
        if deadline is None:
            return "exact" if size <= self.exact_max or self.method == "exact" else None
        if size <= self.transient_max:
            return "exact"
        if size <= self.exact_max or self.method == "exact":
            return "exact-bound"
        return None

    def probe(self, n: int, gap: int, deadline: float | None, target: float) -> Probe:
        """P(correct consensus by ``deadline``) at n; runs added until decided about ``target``."""
        net = self.network(n, gap)
        truth = correct_label(net)
        if truth is None:
            raise CRNError("the model asks no majority question ([question] majority = [...])")
        if self.loading == "poisson":
            return self._poisson_probe(n, gap, deadline, target, truth)
        kind = self._use_exact(net, deadline)
        if kind is not None:
            key = (n, gap, deadline, kind)
            if key not in self._exact:
                self._exact[key] = self._exact_probe(net, n, gap, deadline, truth, kind)
            found = self._exact[key]
            # a Cantelli bound that straddles the target decides nothing: sample instead
            if kind == "exact" or self.method == "exact" or found.low >= target or \
                    found.high < target:
                return found
        store = self._runs.setdefault((n, gap), {"labels": [], "times": np.zeros(0),
                                            "horizon": self._horizon(net, deadline)})
        limit = store["horizon"] if deadline is None else deadline
        if deadline is not None and deadline > store["horizon"] * (1 + 1e-12):
            raise CRNError(f"deadline {deadline} exceeds the runs' horizon {store['horizon']}")

        def count():
            ok = np.array([label == truth for label in store["labels"]], dtype=bool) & \
                (np.nan_to_num(store["times"], nan=np.inf) <= limit)
            return int(ok.sum()), len(store["labels"])

        def draw(round_index, size):
            labels, times = stochastic_decisions(
                net, size, store["horizon"], cell_seed(self._stream, n, gap, round_index),
                workers=self.workers, cluster=self.cluster)
            store["labels"].extend(labels)
            store["times"] = np.concatenate([store["times"], times])

        est = sample_until_decided(count, draw, target, self.runs_max, first=FIRST_ROUND)
        return Probe(n, gap, est.p, est.low, est.high, est.successes, est.trials, "stochastic",
                     deadline)

    def _droplet_cells(self, n: int):
        """Builder of the droplets of a sample whose mean droplet holds n.

        ``networks`` itself, or ``networks.droplets(n)`` when the builder fixes a
        droplet's volume and fuel by the mean (a DNA implementation:
        :class:`crn.analyses.design_questions.LoadedCells`).
        """
        droplets = getattr(self.networks, "droplets", None)
        return self.networks if droplets is None else droplets(int(n))

    def _droplet_deadline(self, deadline, n, totals):
        if deadline is None:
            return None
        if self.scale_deadline:
            return deadline * np.asarray(totals, dtype=float) / n
        return np.full(np.shape(totals), float(deadline))

    def _poisson_probe(self, n, gap, deadline, target, truth) -> Probe:
        tail = min(1e-6, 1e-3 * (1.0 - target))
        exact_key = (n, gap, deadline, "poisson")
        if exact_key in self._exact:
            return self._exact[exact_key]
        if self.method != "stochastic":
            grid = loading_grid(n, gap, tail)
            totals = grid.totals
            top = int(totals[-1])
            cost = float(configurations(self._droplet_cells(n)(top, top % 2)) * len(totals))
            if deadline is not None:
                # a matrix-exponential action costs about (rate norm) x (deadline) products
                cost *= 1 + top * float(np.max(self._droplet_deadline(deadline, n, [top]))) / 10
            if self.method == "exact" or cost <= self.loading_exact_max:
                found = self._poisson_exact(n, gap, deadline, truth, grid)
                self._exact[exact_key] = found
                return found
        key = (n, gap, "poisson")
        net = self.network(n, gap)
        store = self._runs.setdefault(key, {
            "labels": [], "times": np.zeros(0), "major": np.zeros(0, dtype=np.int64),
            "minor": np.zeros(0, dtype=np.int64), "totals": np.zeros(0, dtype=np.int64),
            "horizon": self._horizon(net, deadline)})

        def outcome():
            limits = self._droplet_deadline(deadline, n, store["totals"])
            if limits is None:
                limits = store["horizon"] * np.maximum(store["totals"], 1) / n \
                    if self.scale_deadline else np.full(store["totals"].size, store["horizon"])
            right = np.array([label == truth for label in store["labels"]], dtype=bool)
            return right & (np.nan_to_num(store["times"], nan=np.inf) <= limits)

        def count():
            return int(outcome().sum()), len(store["labels"])

        def draw(round_index, size):
            seq = cell_seed(self._stream, n, gap, round_index, 1)
            load_seed, run_seed = seq.spawn(2)
            major, minor = draw_droplets(n, gap, size, np.random.default_rng(load_seed))
            droplets = self._droplet_cells(n)
            labels = [None] * size
            times = np.full(size, np.nan)
            pairs, inverse = np.unique(np.stack([major, minor], axis=1), axis=0,
                                       return_inverse=True)
            inverse = np.asarray(inverse).reshape(-1)
            for j, child in enumerate(run_seed.spawn(len(pairs))):
                a, b = (int(x) for x in pairs[j])
                where = np.flatnonzero(inverse == j)
                if a + b == 0:
                    continue  # an empty droplet decides nothing
                horizon = store["horizon"] * ((a + b) / n if self.scale_deadline else 1.0)
                got, t = stochastic_decisions(droplet_network(droplets, a, b), where.size,
                                              horizon, child, workers=self.workers,
                                              cluster=self.cluster)
                for i, label, time_ in zip(where, got, t, strict=True):
                    labels[i] = label
                    times[i] = time_
            store["labels"].extend(labels)
            store["times"] = np.concatenate([store["times"], times])
            store["major"] = np.concatenate([store["major"], major])
            store["minor"] = np.concatenate([store["minor"], minor])
            store["totals"] = np.concatenate([store["totals"], major + minor])

        if deadline is not None and not self.scale_deadline and \
                deadline > store["horizon"] * (1 + 1e-12):
            raise CRNError(f"deadline {deadline} exceeds the runs' horizon {store['horizon']}")
        est = sample_until_decided(count, draw, target, self.runs_max, first=FIRST_ROUND)
        ok = outcome()
        reversed_ = store["minor"] >= store["major"]
        # post-stratified on the exact reversal probability; with no reversed droplet drawn
        # (rare loadings) the loading part is bounded by that probability itself
        reversal = reversal_probability(n, gap)
        wrong_rev = float((~ok[reversed_]).mean()) if reversed_.any() else 1.0
        wrong_right = float((~ok[~reversed_]).mean()) if (~reversed_).any() else 1.0
        return Probe(n, gap, est.p, est.low, est.high, est.successes, est.trials, "stochastic",
                     deadline, loading="poisson", reversal=reversal,
                     wrong_loading=reversal * wrong_rev,
                     wrong_kinetics=(1.0 - reversal) * wrong_right)

    def _poisson_exact(self, n, gap, deadline, truth, grid) -> Probe:
        p = wrong_loading = wrong_kinetics = 0.0
        totals = grid.major + grid.minor
        droplets = self._droplet_cells(n)
        for total in grid.totals:
            sel = np.flatnonzero(totals == total)
            if total == 0:
                right = np.zeros(sel.size)
            else:
                limit = self._droplet_deadline(deadline, n, [total])
                right = split_decisions(droplets, int(total), grid.major[sel], truth,
                                        None if limit is None else float(limit[0]))
            w = grid.weight[sel]
            rev = grid.minor[sel] >= grid.major[sel]
            p += float(w @ right)
            wrong_loading += float(w[rev] @ (1.0 - right[rev]))
            wrong_kinetics += float(w[~rev] @ (1.0 - right[~rev]))
        reversal = float(grid.weight[grid.minor >= grid.major].sum())
        # the loading left outside the grid is counted as wrong for the lower bound
        high = min(1.0, p + (1.0 - grid.covered))
        return Probe(n, gap, p, p, high, 0, 0, "exact", deadline, loading="poisson",
                     reversal=reversal, wrong_loading=wrong_loading,
                     wrong_kinetics=wrong_kinetics)

    def _exact_probe(self, net, n, gap, deadline, truth, kind) -> Probe:
        if kind == "exact" and deadline is not None:
            p = exact_decision(net, deadline).get(truth, 0.0)
            return Probe(n, gap, p, p, p, 0, 0, "exact", deadline)
        probabilities, mean, std = exact_absorption(net)
        p = probabilities.get(truth, 0.0)
        if deadline is None:
            return Probe(n, gap, p, p, p, 0, 0, "exact", None)
        low = max(0.0, p - late_consensus_bound(probabilities, mean, std, deadline, label=truth))
        return Probe(n, gap, low, low, p, 0, 0, "exact-bound", deadline)

    def median_time(self, n: int, gap: int) -> float | None:
        """Median first-consensus time at n (runs without consensus count as latest)."""
        net = self.network(n, gap)
        store = self._runs.get((n, gap) if self.loading == "fixed" else (n, gap, "poisson"))
        if store is not None and self.loading == "poisson" and len(store["labels"]):
            times = store["times"]
            if self.scale_deadline:
                # each droplet's parallel time is in its own unit: bring it to the mean's
                times = times * n / np.maximum(store["totals"], 1)
            median = float(np.median(np.nan_to_num(times, nan=np.inf)))
            return median if math.isfinite(median) else None
        if store is None or len(store["labels"]) == 0:
            labels, times = stochastic_decisions(
                net, _TIMING_RUNS, self._horizon(net, None), cell_seed(self._stream, n, gap, 0),
                workers=self.workers, cluster=self.cluster)
        else:
            times = store["times"]
        median = float(np.median(np.nan_to_num(times, nan=np.inf)))
        return median if math.isfinite(median) else None


@dataclass(frozen=True)
class CopiesResult:
    """The smallest population meeting the risk by the deadline, on the safe side.

    Attributes
    ----------
    estimate : int or None
        The answer: the smallest lattice n found by bisection whose 95% upper
        bound on P(no correct decision by the deadline) lies below the risk,
        while at the lattice n one step below it does not. None when no n up
        to ``n_max`` qualifies.
    low, high : int or None
        Range allowing for sampling error: ``low`` is the smallest n whose
        risk could lie below the target (its interval reaches it), ``high``
        the smallest n whose risk surely does (equal to ``estimate``).
    below : int or None
        The lattice n one step below ``estimate``: probed, not surely within
        the risk (None when ``estimate`` is the first lattice point).
    gap_estimate : int or None
        The gap at ``estimate``.
    risk : float
    deadline : float or None
        In parallel time (at the estimate, when it depends on n).
    median_time : float or None
        Median consensus time at the estimate (parallel time).
    method : str
        Methods used at the probes (``exact``, ``stochastic``, or both).
    probes : tuple of Probe
    seed_entropy : int
    ended : str
        Why the search for ``estimate`` ended: ``found``; ``n_max`` (no n up
        to ``n_max`` qualifies); or ``deadline_binds`` (stopped early: the
        optimistic bound fell from its best while growing n, as when a
        deadline binds).
    loading : str
        ``fixed`` or ``poisson`` (n is then the mean per droplet).
    """

    estimate: int | None
    low: int | None
    high: int | None
    gap_estimate: int | None
    risk: float
    deadline: float | None
    median_time: float | None
    method: str
    probes: tuple = field(default=())
    seed_entropy: int = 0
    ended: str = "found"
    below: int | None = None
    loading: str = "fixed"

    def probe_at(self, n: int | None) -> Probe | None:
        """The probe at population n (None when n was not probed)."""
        return next((p for p in self.probes if p.n == n), None)

    @property
    def at_estimate(self) -> Probe | None:
        """The probe at the answer: its P(wrong) interval lies below the risk."""
        return self.probe_at(self.estimate)

    @property
    def at_below(self) -> Probe | None:
        """The probe one lattice step below the answer."""
        return self.probe_at(self.below)


def _search(lat: Lattice, passes: Callable[[int], bool], n_max: int,
            score: Callable[[int], tuple[float, float]] | None = None,
            target: float = 1.0) -> tuple[int | None, str, int | None]:
    """Smallest lattice n that passes, by doubling then bisection; None if none up to n_max.

    Returns the n (or None), why the search ended (``found``, ``n_max`` or
    ``deadline_binds``, stopped early, below) and the lattice n one step below
    the answer, which was probed and failed (None when the answer is the first
    lattice point or there is no answer).

    With ``score`` (an optimistic and a pessimistic probability: the interval
    bounds), doubling stops early when the optimistic bound, short of
    ``target``, has fallen surely below its best (below the best pessimistic
    bound so far; the best optimistic one within a factor two of the target) and
    did not rise over the last three probes: past the point where a deadline
    binds, larger populations only take longer.
    """
    if lat.n(0) > n_max:
        return None, "n_max", None
    if passes(lat.n(0)):
        return lat.n(0), "found", None
    lo, hi = 0, 1
    history = [] if score is None else [score(lat.n(0))]
    while not passes(lat.n(hi)):
        if score is not None:
            history.append(score(lat.n(hi)))
            last = [high for high, _ in history[-3:]]
            peak = max(high for high, _ in history)
            peak_low = max(low for _, low in history)
            # fallen for sure: the last optimistic bound lies below the best pessimistic one
            if (len(last) == 3 and peak >= target / 2 and last[-1] < min(target, peak_low)
                    and last[0] >= last[1] >= last[2]):
                return None, "deadline_binds", None
        lo = hi
        hi *= 2
        if lat.n(hi) > n_max:
            last_k = (n_max - lat.first) // lat.step
            if last_k <= lo or not passes(lat.n(last_k)):
                return None, "n_max", None
            hi = last_k
            break
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if passes(lat.n(mid)):
            hi = mid
        else:
            lo = mid
    return lat.n(hi), "found", lat.n(lo)


def smallest_n(networks: Callable[[int, int], Network], *, gap_fraction: float | None = None,
               gap: int | None = None, risk: float = 0.01,
               deadline: float | Callable[[int], float] | None = None, n_max: int = 10**7,
               prober: Prober | None = None, method: str = "auto", runs_max: int = 4000,
               rng: SeedLike = None, workers: int = 1, cluster: str | None = None,
               loading: str = "fixed", scale_deadline: bool = False) -> CopiesResult:
    """Smallest n with P(correct consensus by the deadline) >= 1 - risk, on the safe side.

    The answer is the smallest lattice n (by doubling and bisection) whose
    95% interval on P(correct) lies wholly above ``1 - risk``, so its upper
    bound on the risk lies below ``risk``; the lattice n one step below was
    probed and does not qualify. Each probe's interval is simultaneous over
    its sequential looks (:func:`crn.analyses.probes.sample_until_decided`), or exact.

    Parameters
    ----------
    networks : callable (n, gap) -> Network
    gap_fraction : float, optional
        Gap as a fraction of n (see :func:`lattice`).
    gap : int, optional
        A fixed gap. A fixed gap gets harder as n grows, so this finds the
        smallest n >= gap + 2 that meets the risk, normally gap + 2 itself.
    risk : float, default 0.01
    deadline : float or callable n -> float, optional
        In parallel time; a callable when it depends on n (a fixed droplet
        volume makes the concentration, and so the time unit, depend on n).
        None: eventual consensus.
    n_max : int
        Largest n searched.
    prober : Prober, optional
        Reuse cached runs (several deadlines on the same populations).
    method, runs_max, rng, workers, cluster, loading, scale_deadline :
        For a new :class:`Prober` (see there).

    Returns
    -------
    CopiesResult

    Notes
    -----
    The search assumes the probability grows with n along the lattice, as it
    does for majority protocols at a fixed relative gap (Angluin, Aspnes,
    Eisenstat 2008: error exponentially small in gap**2 / n), up to where a
    deadline binds: consensus time grows with n, so past some n the
    probability by a fixed deadline falls again. Doubling therefore stops
    (no answer) once the optimistic bound, below the target, has fallen surely
    below an earlier probe (under its pessimistic bound; the best optimistic
    bound at least half the target) and not risen over three probes.

    Examples
    --------
    Approximate majority with a gap of a fifth of n, eventual consensus, a 5%
    risk, every probe solved exactly:

    >>> from crn.analyses.probes import InitialSplit
    >>> from crn.io.models import load_model
    >>> net = load_model("models/approximate_majority.toml").network
    >>> answer = smallest_n(InitialSplit(net), gap_fraction=0.2, risk=0.05, method="exact")
    >>> answer.estimate, answer.gap_estimate, answer.below
    (70, 14, 65)
    >>> [(p.n, round(1 - p.p, 4)) for p in answer.probes if p.n in (65, 70)]
    [(65, 0.0517), (70, 0.0456)]
    """
    if not 0 < risk < 1:
        raise CRNError(f"risk must lie in (0, 1), got {risk}")
    lat = lattice(gap_fraction, gap)
    if prober is None:
        prober = Prober(networks, method=method, runs_max=runs_max, rng=rng, workers=workers,
                        cluster=cluster, loading=loading, scale_deadline=scale_deadline)
    target = 1.0 - risk
    seen: dict[int, Probe] = {}

    def deadline_at(n):
        if deadline is None or not callable(deadline):
            return deadline
        value = float(deadline(n))
        if not value > 0:
            raise CRNError(f"deadline at n={n} must be positive, got {value}")
        return value

    def probe(n):
        if n not in seen:
            seen[n] = prober.probe(n, lat.gap_of(n), deadline_at(n), target)
        return seen[n]

    def optimistic(n):
        return probe(n).high, probe(n).low

    # the answer: P(correct) surely meets the target (its lower bound does)
    estimate, ended, below = _search(lat, lambda n: probe(n).low >= target, n_max, optimistic,
                                     target)
    low, _, _ = _search(lat, lambda n: probe(n).high >= target, n_max, optimistic, target)
    if estimate is not None and (low is None or low > estimate):
        low = estimate  # noisy probes need not be monotone; the range still holds the answer
    median = None if estimate is None else prober.median_time(estimate, lat.gap_of(estimate))
    methods = sorted({p.method for p in seen.values()})
    return CopiesResult(
        estimate=estimate, low=low, high=estimate,
        gap_estimate=None if estimate is None else lat.gap_of(estimate), risk=float(risk),
        deadline=None if estimate is None else deadline_at(estimate), median_time=median,
        method="+".join(methods), probes=tuple(seen[n] for n in sorted(seen)),
        seed_entropy=prober.entropy, ended=ended, below=below, loading=prober.loading,
    )


def physical_outputs(n: int | None, *, concentration_molar: float | None = None,
                     volume_liters: float | None = None, rate: float | None = None,
                     parallel_time: float | None = None) -> dict:
    """Concentration, volume and seconds for n molecules (``n = C V N_A``).

    Parameters
    ----------
    n : int or None
    concentration_molar, volume_liters : float, optional
        At most one; the other follows from n.
    rate : float, optional
        Bimolecular rate constant k_phys (1/(M s)); with a concentration it
        turns ``parallel_time`` into seconds (one unit = 1 / (k_phys C)).
    parallel_time : float, optional

    Returns
    -------
    dict
        ``concentration_molar``, ``volume_liters``, ``seconds``, ``hours``
        (None where they do not follow).
    """
    if concentration_molar is not None and volume_liters is not None:
        raise CRNError("give a concentration or a volume, not both")
    conc, vol = concentration_molar, volume_liters
    if n is not None:
        if conc is not None:
            vol = volume_for(n, conc)
        elif vol is not None:
            conc = concentration_for(n, vol)
    seconds = None
    if rate is not None and conc is not None and parallel_time is not None:
        seconds = to_seconds(parallel_time, rate, conc)
    return {"concentration_molar": conc, "volume_liters": vol, "seconds": seconds,
            "hours": None if seconds is None else seconds / 3600.0}


def parallel_deadline(seconds: float, rate: float, *, concentration_molar: float | None = None,
                      volume_liters: float | None = None) -> float | Callable[[int], float]:
    """A deadline in seconds as parallel time, the unit :func:`smallest_n` searches in.

    Parameters
    ----------
    seconds : float
    rate : float
        Bimolecular rate constant k_phys (1/(M s)) a protocol reaction of rate 1 is built at.
    concentration_molar, volume_liters : float
        Exactly one: the total concentration, or the droplet volume.

    Returns
    -------
    float or callable n -> float
        At a fixed concentration one number (:func:`crn.core.units.to_parallel_time`);
        in a fixed volume the concentration, and so the time unit, grows with n:
        a picklable function of n (pass ``scale_deadline=True`` to :func:`smallest_n`).

    Raises
    ------
    CRNError
        Without exactly one of a concentration and a volume.

    Examples
    --------
    >>> parallel_deadline(7200.0, 1e6, concentration_molar=1e-8)
    72.0
    """
    if (concentration_molar is None) == (volume_liters is None):
        raise CRNError("a deadline in seconds needs exactly one of a concentration and a volume "
                       "(to convert it into parallel time)")
    if concentration_molar is not None:
        return to_parallel_time(seconds, rate, concentration_molar)
    return _VolumeDeadline(float(seconds), float(rate), float(cast(float, volume_liters)))


@dataclass(frozen=True)
class _VolumeDeadline:
    """A deadline in seconds as parallel time at n molecules in a fixed volume."""

    seconds: float
    rate: float
    volume_liters: float

    def __call__(self, n: int) -> float:
        return to_parallel_time(self.seconds, self.rate, concentration_for(n, self.volume_liters))


def physical_answer(result: CopiesResult, *, concentration_molar: float | None = None,
                    volume_liters: float | None = None, rate: float | None = None) -> dict:
    """A copies answer in lab units: concentration, volume and time at the answer, and the
    volume and concentration over its range.

    Parameters
    ----------
    result : CopiesResult
    concentration_molar, volume_liters : float, optional
        At most one (see :func:`physical_outputs`).
    rate : float, optional
        Bimolecular rate constant (1/(M s)); with a concentration the median
        consensus time is given in seconds and hours.

    Returns
    -------
    dict
        :func:`physical_outputs` at ``result.estimate`` (with the median time),
        plus ``volume_liters_interval`` and ``concentration_molar_interval``
        (each ``[at low, at high]``, None where they do not follow).
    """
    out = physical_outputs(result.estimate, concentration_molar=concentration_molar,
                           volume_liters=volume_liters, rate=rate,
                           parallel_time=result.median_time)
    ends = [physical_outputs(n, concentration_molar=concentration_molar,
                             volume_liters=volume_liters) for n in (result.low, result.high)]
    out["volume_liters_interval"] = [end["volume_liters"] for end in ends]
    out["concentration_molar_interval"] = [end["concentration_molar"] for end in ends]
    return out


def risk_parts(probe: Probe | None) -> dict | None:
    """Poisson loading: P(wrong) from reversed or tied loadings and from the kinetics.

    Parameters
    ----------
    probe : Probe or None

    Returns
    -------
    dict or None
        ``{loading, kinetics, reversal}`` (see :class:`Probe`); None without a
        probe or for a fixed loading.
    """
    if probe is None or probe.loading != "poisson":
        return None
    return {"loading": probe.wrong_loading, "kinetics": probe.wrong_kinetics,
            "reversal": probe.reversal}


def p_wrong_summary(probe: Probe | None) -> dict | None:
    """P(no correct decision by the deadline) at a probe, with its 95% interval.

    Parameters
    ----------
    probe : Probe or None

    Returns
    -------
    dict or None
        ``{estimate, low, high, runs, method}``; None without a probe.
    """
    if probe is None:
        return None
    p, low, high = probe.p_wrong
    return {"estimate": p, "low": low, "high": high, "runs": probe.trials,
            "method": probe.method}
