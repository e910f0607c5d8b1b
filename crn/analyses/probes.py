"""Asking the engines one question: which label does a network decide, and when.

Shared by the regime maps and the copy-number search: build the network of a
cell (n agents, input gap), and get its decision from the mean-field ODE, from
exact small-population analysis, or from seeded stochastic runs. Engines are
imported when first used.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from crn.core.errors import CRNError
from crn.core.network import Network

if TYPE_CHECKING:
    from crn.core.types import SeedLike

__all__ = [
    "InitialSplit",
    "ModelParameters",
    "split_counts",
    "gap_for_fraction",
    "cell_seed",
    "ode_decision",
    "exact_decision",
    "exact_absorption",
    "cantelli_tail",
    "late_consensus_bound",
    "look_schedule",
    "look_levels",
    "simultaneous_interval",
    "sided_interval",
    "SequentialEstimate",
    "sample_until_decided",
    "FIRST_ROUND",
    "stochastic_decisions",
    "configurations",
    "GAP_FRACTION_RANGE",
]

#: The one wording of the gap-fraction range (0, 1): 0 is a tie, 1 leaves no minority.
GAP_FRACTION_RANGE = "--gap-fraction must lie in (0, 1), strictly between a tie and no minority"


def split_counts(n: int, gap: int) -> tuple[int, int]:
    """Counts ``((n + gap) / 2, (n - gap) / 2)`` of the majority and minority inputs.

    Raises
    ------
    CRNError
        When n and gap differ in parity, the gap is negative or exceeds n.
    """
    n, gap = int(n), int(gap)
    if n < 1 or gap < 0 or gap > n:
        raise CRNError(f"need 0 <= gap <= n and n >= 1, got n={n}, gap={gap}")
    if (n - gap) % 2:
        raise CRNError(f"n={n} and gap={gap} differ in parity: (n + gap) / 2 is not whole")
    return (n + gap) // 2, (n - gap) // 2


def gap_for_fraction(n: int, fraction: float) -> int:
    """The whole gap nearest ``fraction * n`` with the parity of n, at least 1 (odd n) or 2.

    Rounding keeps ``(n + gap) / 2`` whole; a gap that would round to 0 (a
    tie, which has no right answer to get wrong) is raised to the smallest
    positive gap of n's parity, and a gap above n is lowered to n.
    """
    if not 0 < fraction < 1:
        raise CRNError(f"{GAP_FRACTION_RANGE}, got {fraction}")
    n = int(n)
    target = fraction * n
    low = math.floor(target)
    if (n - low) % 2:
        low -= 1
    gap = low if target - low < low + 2 - target else low + 2
    smallest = 2 - n % 2
    return int(min(max(gap, smallest), n))


@dataclass(frozen=True)
class InitialSplit:
    """Networks for cells from one network: the inputs get ``(n +- gap) / 2``.

    Other species keep their initial counts, so n counts the two inputs. The
    object is picklable, for worker processes.
    """

    network: Network

    def __post_init__(self):
        if self.network.inputs is None:
            raise CRNError("the model asks no majority question ([question] majority = [...]); "
                           "setting n and the gap needs the two input states")

    def __call__(self, n: int, gap: int) -> Network:
        """The network with the inputs split ``n``, ``gap``."""
        a, b = self.network.inputs or (-1, -1)  # never None: checked in __post_init__
        x0 = np.array(self.network.initial, dtype=np.int64)
        x0[a], x0[b] = split_counts(n, gap)
        return self.network.with_initial(x0)


@dataclass(frozen=True)
class ModelParameters:
    """Networks for cells from a model's text with parameters ``n`` and ``gap`` set.

    Used when the model file defines both parameters, so that every count the
    file derives from them (blank states, leaders) follows. Picklable.
    """

    text: str
    source: str
    overrides: tuple = ()

    def __call__(self, n: int, gap: int) -> Network:
        """The model rebuilt with parameters ``n`` and ``gap``."""
        from crn.core.model import parse_model

        split_counts(n, gap)
        values = dict(self.overrides)
        values.update(n=int(n), gap=int(gap))
        return parse_model(self.text, source=self.source, overrides=values).network


def cell_seed(entropy: int | np.random.SeedSequence, *key: int) -> np.random.SeedSequence:
    """The child stream of one cell (and round): same key, same numbers, in any order.

    A child of the root SeedSequence addressed by its spawn key, as
    ``SeedSequence.spawn`` builds them, but keyed by the cell rather than by
    the order cells were reached, so a resumed or parallel sweep draws the
    same numbers.
    """
    from crn.runtime.seeds import keyed_stream

    return keyed_stream(entropy, *key)


def ode_decision(net: Network, until: float) -> tuple[str | None, float | None]:
    """The mean field's consensus label and time (None, None without consensus by ``until``)."""
    from crn.solvers.ode import solve_mean_field

    result = solve_mean_field(net, until=float(until), stop_at_consensus=True)
    outcome = result.consensus
    if outcome is None or outcome.label is None:
        return None, None
    return outcome.label, outcome.time


def configurations(net: Network) -> int:
    """Estimated number of reachable configurations (the exact engine's cost)."""
    from crn.solvers.exact import estimate_configurations

    return int(estimate_configurations(net))


def exact_decision(net: Network, until: float | None = None) -> dict:
    """Exact probabilities of consensus on each label (``"none"`` for none).

    With ``until``: stable consensus reached by that time (transient analysis,
    :func:`crn.solvers.exact.transient_outcomes`); without: eventual consensus
    (absorption, :func:`crn.solvers.exact.exact_outcomes`).
    """
    from crn.solvers.exact import transient_outcomes

    if until is None:
        return dict(exact_absorption(net)[0])
    probabilities = dict(transient_outcomes(net, float(until)))
    probabilities.pop("lost", None)
    return {k: float(v) for k, v in probabilities.items()}


def exact_absorption(net: Network) -> tuple[dict[str, float], float, float]:
    """Eventual consensus probabilities and the mean and std of the time to it.

    Returns
    -------
    probabilities : dict of str to float
        Label of the first consensus -> probability, ``"none"`` for never
        reaching consensus: the quantity the stochastic runs estimate.
    mean, std : float
        Of the time to the first consensus, given that it is reached.
    """
    from crn.solvers.exact import exact_outcomes

    result = exact_outcomes(net, absorb="first")
    probabilities = {k: float(v) for k, v in result.probabilities.items()}
    probabilities.setdefault("none", 0.0)
    return probabilities, float(result.expected_time), float(result.time_std)


def cantelli_tail(mean: float, std: float, horizon: float) -> float:
    """Upper bound on P(tau > horizon) from the mean and std of tau (Cantelli's inequality).

    ``P(tau - mean >= a) <= std**2 / (std**2 + a**2)`` for ``a > 0``; 1 when
    the horizon does not exceed the mean.

    References
    ----------
    Cantelli, 1928; see Grimmett, Stirzaker, "Probability and Random
    Processes", 3rd ed., problem 7.11.9.
    """
    if not (math.isfinite(mean) and math.isfinite(std)):
        return 1.0
    slack = horizon - mean
    if slack <= 0:
        return 1.0
    return float(std * std / (std * std + slack * slack))


def late_consensus_bound(probabilities: dict, mean: float, std: float, horizon: float,
                         label: str | None = None) -> float:
    """Upper bound on the probability of reaching stable consensus only after ``horizon``.

    The mean and std of the consensus time tau from :func:`exact_absorption`
    are conditioned on reaching consensus at all (on any label), so Cantelli's
    bound applies to that conditional law: ``P(absorbed, tau > horizon) <=
    P(absorbed) * cantelli_tail(mean, std, horizon)``. With ``label`` the
    bound is on consensus on that label after the horizon, which is also at
    most ``P(label)``.

    Parameters
    ----------
    probabilities : dict of str to float
        Eventual consensus probabilities, ``"none"`` for never.
    mean, std : float
        Of the consensus time given consensus.
    horizon : float
    label : str, optional

    Returns
    -------
    float
        In ``[0, P(label)]`` (``[0, P(absorbed)]`` without a label).
    """
    absorbed = min(max(1.0 - float(probabilities.get("none", 0.0)), 0.0), 1.0)
    bound = absorbed * cantelli_tail(mean, std, horizon)
    if label is not None:
        bound = min(bound, float(probabilities.get(label, 0.0)))
    return float(max(bound, 0.0))


#: Runs in the first round of a sequential estimate; the total then doubles each round.
FIRST_ROUND = 50


def look_schedule(runs_max: int, first: int = FIRST_ROUND) -> tuple[int, ...]:
    """Cumulative run counts at which a sequential estimate looks: first, 2 first, ..., runs_max.

    The totals double from ``first`` and the last is ``runs_max``; its length
    is the number of looks K the Bonferroni correction divides by.
    """
    runs_max, first = int(runs_max), int(first)
    if runs_max < 1 or first < 1:
        raise CRNError(f"runs_max and the first round must be >= 1, got {runs_max}, {first}")
    totals, total = [], min(first, runs_max)
    while total < runs_max:
        totals.append(total)
        total *= 2
    totals.append(runs_max)
    return tuple(totals)


@lru_cache(maxsize=65536)
def simultaneous_interval(successes: int, trials: int, looks: int = 1,
                          confidence: float = 0.95) -> tuple[float, float, float]:
    """Clopper-Pearson interval at level ``1 - (1 - confidence) / looks`` (Bonferroni).

    Over a sequential estimate that looks at most ``looks`` times, the
    intervals at every look cover the true probability simultaneously with
    probability at least ``confidence``, so stopping at any look keeps it.

    Returns
    -------
    p, low, high : float
        ``successes / trials`` and the interval (``0, 0, 1`` for no trials).

    References
    ----------
    Clopper, Pearson, Biometrika 26(4), 1934; Bonferroni correction over looks
    (e.g. Jennison, Turnbull, "Group Sequential Methods", 2000, ch. 1).
    """
    from scipy.stats import binomtest

    k, n = int(successes), int(trials)
    if n == 0:
        return 0.0, 0.0, 1.0
    if not 0 <= k <= n:
        raise CRNError(f"need 0 <= successes <= trials, got {k} of {n}")
    level = 1.0 - (1.0 - float(confidence)) / max(int(looks), 1)
    ci = binomtest(k, n).proportion_ci(confidence_level=level, method="exact")
    return k / n, float(ci.low), float(ci.high)


def _tail(n: int, threshold: float, count: int) -> float:
    """``P(Bin(n, threshold) <= count)``: the least level at which ``count`` of ``n``
    puts the Clopper-Pearson upper bound at ``threshold``.
    """
    from scipy.stats import binom

    return float(binom.cdf(count, n, threshold)) if count >= 0 else 0.0


def _spend_one_side(schedule, threshold: float, a: float) -> list[float]:
    """Upper-bound levels: keep every decision of the even split, move its spare budget.

    ``c_k`` is the most successes at look k whose upper bound falls below
    ``threshold`` at the even level ``a / K``; ``need_k = P(Bin(n_k, threshold) <=
    c_k)`` is the least level that keeps that decision. What the even split
    spends beyond the needs is given to the first look where it lets one more
    success decide, and what is left after that is spread evenly.
    """
    looks = len(schedule)
    even = a / looks
    counts, needs = [], []
    for n in schedule:
        c = -1
        while c < n and _tail(n, threshold, c + 1) < even:
            c += 1
        counts.append(c)
        needs.append(_tail(n, threshold, c))
    spare = a - sum(needs)
    for j, n in enumerate(schedule):
        more = _tail(n, threshold, counts[j] + 1) if counts[j] < n else math.inf
        if more - needs[j] < spare:
            spare -= more - needs[j]
            needs[j] = more
            break
    return [need + spare / looks for need in needs]


def look_levels(schedule: Sequence[int], threshold: float, confidence: float = 0.95,
                favour: str | None = None) -> tuple[tuple[float, float], ...]:
    """One-sided error levels ``(lower, upper)`` of the interval at each look.

    Each side of the interval may be wrong (bound above / below the true
    probability) with total probability ``a = (1 - confidence) / 2`` over all
    the looks; by the union bound (Bonferroni's inequality) any split of ``a``
    over the looks that is fixed before the data keeps that guarantee, so the
    intervals at every look cover the probability simultaneously with
    probability at least ``confidence`` (an error-spending plan in the sense
    of Lan and DeMets, with the union bound in place of the joint law).

    Without ``favour`` both sides spend ``a / K`` at each of the K looks
    (plain Bonferroni, :func:`simultaneous_interval`). With ``favour="below"``
    the lower side keeps ``a / K`` per look and the upper side, which decides
    ``high < threshold``, is re-split: at each look it spends just what keeps
    every decision the even split makes there (the largest count c_k that
    decides at level ``a / K`` still decides), the budget this frees goes to
    the first look where it lets one more count decide (at threshold 0.01 and
    looks 50, 100, ..., 1000: no disagreement in 400 runs), and the rest is
    spread evenly. So every ``high < threshold`` decision of the even split is
    kept, and one more is added. ``favour="above"`` is the mirror image for
    the lower side. The plan depends on the schedule, the threshold and the
    confidence only, never on the counts.

    Parameters
    ----------
    schedule : sequence of int
        Cumulative run counts of the looks (:func:`look_schedule`).
    threshold : float
    confidence : float
    favour : {None, "below", "above"}

    Returns
    -------
    tuple of (float, float)
        Per look, the one-sided levels of the lower and the upper bound.

    References
    ----------
    Lan, DeMets, "Discrete sequential boundaries for clinical trials",
    Biometrika 70(3), 1983 (error spending over looks); Jennison, Turnbull,
    "Group Sequential Methods", 2000, ch. 1 and 7.
    """
    if favour not in (None, "below", "above"):
        raise CRNError(f"favour must be None, 'below' or 'above', got {favour!r}")
    schedule = tuple(int(n) for n in schedule)
    looks = len(schedule)
    a = (1.0 - float(confidence)) / 2
    even = [a / looks] * looks
    if favour is None or not 0 < threshold < 1:
        return tuple(zip(even, even, strict=True))
    if favour == "below":
        return tuple(zip(even, _spend_one_side(schedule, float(threshold), a), strict=True))
    # mirror: failures of the complementary event against 1 - threshold
    return tuple(zip(_spend_one_side(schedule, 1.0 - float(threshold), a), even, strict=True))


@lru_cache(maxsize=65536)
def sided_interval(successes: int, trials: int, lower_level: float,
                   upper_level: float) -> tuple[float, float, float]:
    """Clopper-Pearson bounds with their own one-sided levels.

    ``P(low > p) <= lower_level`` and ``P(high < p) <= upper_level`` for the
    true probability p (exact binomial tails). With both levels ``(1 - c) / 2``
    this is the two-sided Clopper-Pearson interval at level c.

    Returns
    -------
    p, low, high : float
        ``successes / trials`` and the bounds (``0, 0, 1`` for no trials).

    References
    ----------
    Clopper, Pearson, Biometrika 26(4), 1934.
    """
    from scipy.stats import beta

    k, n = int(successes), int(trials)
    if n == 0:
        return 0.0, 0.0, 1.0
    if not 0 <= k <= n:
        raise CRNError(f"need 0 <= successes <= trials, got {k} of {n}")
    low = float(beta.ppf(lower_level, k, n - k + 1)) if k > 0 else 0.0
    high = float(beta.isf(upper_level, k + 1, n - k)) if k < n else 1.0
    return k / n, low, high


@dataclass(frozen=True)
class SequentialEstimate:
    """Result of :func:`sample_until_decided`: counts and the simultaneous interval."""

    successes: int
    trials: int
    p: float
    low: float
    high: float


def sample_until_decided(count: Callable[[], tuple[int, int]],
                         draw: Callable[[int, int], None], threshold: float, runs_max: int, *,
                         first: int = FIRST_ROUND, confidence: float = 0.95,
                         favour: str | None = None) -> SequentialEstimate:
    """Add runs in rounds until the interval lies wholly above or below ``threshold``.

    Looks happen at the totals of :func:`look_schedule` (``first``, doubling,
    up to ``runs_max``). Without ``favour`` the interval at each look is
    Clopper-Pearson at level ``1 - (1 - confidence) / K`` with K the number of
    looks the schedule can make (Bonferroni); with it, each bound has the
    one-sided level :func:`look_levels` plans (the side that decides on the
    favoured side of ``threshold`` keeps every decision of the even split and
    adds one earlier one). Either way it is a ``confidence``
    interval simultaneous over the sequential looks, and the decision ``low >
    threshold`` (or ``high < threshold``) is wrong with probability at most
    ``(1 - confidence) / 2`` on each side.

    Parameters
    ----------
    count : callable () -> (successes, trials)
        Counts over the runs drawn so far (runs may already exist: a cache).
    draw : callable (round, size) -> None
        Adds ``size`` runs; ``round`` is the index of the look they lead to
        (0 for the first), to key the random stream.
    threshold : float
    runs_max : int
    first : int
    confidence : float
    favour : {None, "below", "above"}
        See :func:`look_levels`.

    Returns
    -------
    SequentialEstimate
    """
    schedule = look_schedule(runs_max, first)
    looks = len(schedule)
    levels = None if favour is None else look_levels(schedule, threshold, confidence, favour)
    while True:
        k, n = count()
        if n:
            if levels is None:
                p, low, high = simultaneous_interval(k, n, looks, confidence)
            else:
                # the look these runs complete (a cache may hold runs beyond a look)
                at = next((i for i, total in enumerate(schedule) if total >= n), looks - 1)
                p, low, high = sided_interval(k, n, *levels[at])
            if low > threshold or high < threshold or n >= schedule[-1]:
                return SequentialEstimate(int(k), int(n), p, low, high)
        index = next(i for i, total in enumerate(schedule) if total > n)
        draw(index, schedule[index] - n)


def stochastic_decisions(net: Network, runs: int, until: float, rng: SeedLike, *,
                         workers: int | None = 1, cluster: str | None = None,
                         engine: str = "auto") -> tuple[list, np.ndarray]:
    """First-consensus labels and times of ``runs`` seeded stochastic runs.

    Returns
    -------
    labels : list of (str or None), length runs
    times : ndarray of float64, shape (runs,)
        NaN for runs without consensus by ``until``.
    """
    from crn.solvers.simulate import simulate

    ensemble = simulate(net, runs=int(runs), until=float(until), engine=engine, rng=rng,
                        workers=workers, cluster=cluster, stop_at_consensus=True)
    times = np.asarray(ensemble.consensus_times, dtype=np.float64)
    return list(ensemble.labels), times
