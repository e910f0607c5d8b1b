"""Copy numbers: the smallest population that decides correctly, by a deadline, at a given risk.

The population n runs over a lattice on which the requested gap is exact
(``gap = F n`` with n and gap of equal parity, or a fixed gap G with
``n = G + 2, G + 4, ...``). At each probed n the probability of correct
consensus by the deadline comes from exact analysis where the state space is
small and from seeded stochastic runs otherwise (added in rounds until the 95%
interval simultaneous over the sequential looks, Clopper-Pearson with a
Bonferroni correction, lies wholly above or below the target, or ``runs_max``
is spent). Bracketing by doubling and bisection then find the smallest n whose
estimate meets ``1 - risk`` and, from the interval bounds, the smallest n that
could meet it (low) and the smallest n that surely meets it (high).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from .errors import CRNError
from .network import Network
from .outcome import correct_label
from .probes import (
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
from .units import AVOGADRO

__all__ = ["Probe", "CopiesResult", "Prober", "Lattice", "lattice", "smallest_n",
           "physical_outputs"]

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
        :func:`crn.probes.sample_until_decided`; for exact analysis
        ``low == high == p``, or the eventual probability less a Cantelli
        bound on consensus after the deadline).
    successes, trials : int
        Runs deciding correctly by the deadline, runs (0, 0 when exact).
    method : str
        ``exact``, ``exact-bound`` or ``stochastic``.
    deadline : float or None
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


@dataclass(frozen=True)
class Lattice:
    """Populations ``n_k = first + step * k`` (k >= 0) and their gaps."""

    first: int
    step: int
    fraction: Fraction | None
    gap: int | None

    def n(self, k: int) -> int:
        return self.first + self.step * int(k)

    def gap_of(self, n: int) -> int:
        if self.fraction is not None:
            return int(self.fraction * n)
        return int(self.gap)


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
    if int(gap) != gap or gap < 1:
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
        Passed to :func:`crn.simulate.simulate`.
    """

    def __init__(self, networks: Callable[[int, int], Network], *, horizon: float | None = None,
                 method: str = "auto", exact_max: int = 100_000, transient_max: int = 10_000,
                 runs_max: int = 4000, rng=None, workers: int = 1, cluster=None):
        if method not in ("auto", "exact", "stochastic"):
            raise CRNError(f"method must be auto, exact or stochastic, got {method!r}")
        seq = rng if isinstance(rng, np.random.SeedSequence) else np.random.SeedSequence(rng)
        self.entropy = int(seq.entropy)
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
        key = (n, gap)
        store = self._runs.setdefault(key, {"labels": [], "times": np.zeros(0),
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
        store = self._runs.get((n, gap))
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
    """The smallest population meeting the risk by the deadline.

    Attributes
    ----------
    estimate, low, high : int or None
        Smallest n whose estimate / upper bound / lower bound of
        P(correct by the deadline) reaches ``1 - risk``: ``low <= estimate <=
        high`` bracket the answer allowing for sampling error. None when no n
        up to ``n_max`` qualifies.
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


def _search(lat: Lattice, passes: Callable[[int], bool], n_max: int,
            score: Callable[[int], float] | None = None,
            target: float = 1.0) -> tuple[int | None, str]:
    """Smallest lattice n that passes, by doubling then bisection; None if none up to n_max.

    Returns the n (or None) and why the search ended: ``found``, ``n_max`` or
    ``deadline_binds`` (stopped early, below).

    With ``score`` (an optimistic probability), doubling stops early when the
    score, short of ``target``, has fallen below its best (which came within
    a factor two of the target) and did not rise over the last three probes:
    past the point where a deadline binds, larger populations only take longer.
    """
    if lat.n(0) > n_max:
        return None, "n_max"
    if passes(lat.n(0)):
        return lat.n(0), "found"
    lo, hi = 0, 1
    history = [] if score is None else [score(lat.n(0))]
    while not passes(lat.n(hi)):
        if score is not None:
            history.append(score(lat.n(hi)))
            last = history[-3:]
            peak = max(history)
            if (len(last) == 3 and peak >= target / 2 and last[-1] < min(target, peak)
                    and last[0] >= last[1] >= last[2]):
                return None, "deadline_binds"
        lo = hi
        hi *= 2
        if lat.n(hi) > n_max:
            last_k = (n_max - lat.first) // lat.step
            if last_k <= lo or not passes(lat.n(last_k)):
                return None, "n_max"
            hi = last_k
            break
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if passes(lat.n(mid)):
            hi = mid
        else:
            lo = mid
    return lat.n(hi), "found"


def smallest_n(networks: Callable[[int, int], Network], *, gap_fraction: float | None = None,
               gap: int | None = None, risk: float = 0.01,
               deadline: float | Callable[[int], float] | None = None, n_max: int = 10**7,
               prober: Prober | None = None, method: str = "auto", runs_max: int = 4000,
               rng=None, workers: int = 1, cluster=None) -> CopiesResult:
    """Smallest n with P(correct consensus by the deadline) >= 1 - risk.

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
    method, runs_max, rng, workers, cluster :
        For a new :class:`Prober`.

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
    (no answer) once the optimistic bound, below the target, has fallen from
    its best (at least half the target) and not risen over three probes.
    """
    if not 0 < risk < 1:
        raise CRNError(f"risk must lie in (0, 1), got {risk}")
    lat = lattice(gap_fraction, gap)
    if prober is None:
        prober = Prober(networks, method=method, runs_max=runs_max, rng=rng, workers=workers,
                        cluster=cluster)
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
        return probe(n).high

    estimate, ended = _search(lat, lambda n: probe(n).p >= target, n_max, optimistic, target)
    low, _ = _search(lat, lambda n: probe(n).high >= target, n_max, optimistic, target)
    high, _ = _search(lat, lambda n: probe(n).low >= target, n_max, optimistic, target)
    median = None if estimate is None else prober.median_time(estimate, lat.gap_of(estimate))
    methods = sorted({p.method for p in seen.values()})
    return CopiesResult(
        estimate=estimate, low=low, high=high,
        gap_estimate=None if estimate is None else lat.gap_of(estimate), risk=float(risk),
        deadline=None if estimate is None else deadline_at(estimate), median_time=median,
        method="+".join(methods), probes=tuple(seen[n] for n in sorted(seen)),
        seed_entropy=prober.entropy, ended=ended,
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
            vol = n / (conc * AVOGADRO)
        elif vol is not None:
            conc = n / (vol * AVOGADRO)
    seconds = None
    if rate is not None and conc is not None and parallel_time is not None:
        seconds = float(parallel_time) / (float(rate) * conc)
    return {"concentration_molar": conc, "volume_liters": vol, "seconds": seconds,
            "hours": None if seconds is None else seconds / 3600.0}
