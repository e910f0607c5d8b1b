"""The designer's questions about a DNA implementation, answered from the engines.

* :func:`fuel_for_time`: how much fuel excess (fuel concentration over the
  signal concentration) makes the implementation's mean-field decision time
  come within a tolerance (10%) of the formal network's.
* :func:`leak_tolerance`: the largest leak rate constant at which a regime
  cell stays ``ok`` at the given risk with the correct decision.
* :func:`implementation_copies`: the copy-number search on the implementation
  beside the formal one, with fixed or Poisson droplet loading: more copies, a
  later decision (a shorter deadline left for the formal kinetics), or no
  droplet size at all and why (fuel runs out, leak dominates, or too few runs
  to certify the risk: :func:`risk_floor`).

Pure functions: no printing, no files.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from crn.analyses.implemented import (
    Diagnosis,
    ImplementedCells,
    diagnose,
    formal_ode_horizon,
    implementation_of,
)
from crn.core.errors import CRNError
from crn.core.network import Network

if TYPE_CHECKING:
    from crn.core.types import SeedLike
    from crn.dna.parameters import DnaParameters

__all__ = ["FuelAnswer", "fuel_for_time", "LeakAnswer", "leak_tolerance", "leak_tolerances",
           "ImplementationCopies", "implementation_copies", "LoadedCells", "risk_floor",
           "runs_for_risk"]


@dataclass(frozen=True)
class FuelAnswer:
    """The smallest fuel excess whose mean-field decision time is within the tolerance.

    Attributes
    ----------
    excess : float or None
        Fuel concentration / signal concentration; None when no excess up to
        ``excess_max`` is close enough (``reason`` says why).
    fuel_molar : float or None
        ``excess * concentration``.
    formal_time : float
        Mean-field consensus time of the formal network (its time unit).
    time : float or None
        The implementation's at ``excess``.
    tolerance : float
    tried : tuple of (float, float or None)
        Every excess solved and the implementation's consensus time there.
    reason : str
        ``found``; ``excess_max`` (still slower or never deciding at the
        largest excess tried: q_max too low, or the leak, which grows with the
        fuel); ``formal undecided``.
    """

    excess: float | None
    fuel_molar: float | None
    formal_time: float | None
    time: float | None
    tolerance: float
    tried: tuple = ()
    reason: str = "found"


def _ode_time(net: Network, until: float) -> float | None:
    from crn.analyses.probes import ode_decision

    return ode_decision(net, until)[1]


def fuel_for_time(formal: Network, scheme: str, params: DnaParameters, *, tolerance: float = 0.1,
                  excess_min: float = 2.0, excess_max: float = 1e4,
                  refine: int = 6) -> FuelAnswer:
    """Smallest fuel excess whose implementation decides within ``tolerance`` of the formal time.

    The mean-field consensus time of the implementation is solved at fuel
    concentrations ``e C`` for excesses e doubling from ``excess_min``; the
    first e whose time lies within ``tolerance`` of the formal network's
    time, and the last below it, bracket the answer, refined by ``refine``
    bisections in log e. The construction approaches the formal kinetics as
    fuel excess and q_max grow (Soloveichik, Seelig, Winfree, PNAS
    107:5393, 2010); with a leak, which grows with the fuel, the time may
    never come close.

    Parameters
    ----------
    formal : Network
    scheme : str
    params : crn.dna.DnaParameters
        Everything but the fuel (``params.fuel`` is replaced).
    tolerance : float, default 0.1
    excess_min, excess_max : float
    refine : int

    Returns
    -------
    FuelAnswer

    Raises
    ------
    CRNError
        For a tolerance outside (0, 1) or ``excess_min`` not above 1.
    """
    if not 0 < tolerance < 1:
        raise CRNError(f"tolerance must lie in (0, 1), got {tolerance}")
    if not 1 < excess_min < excess_max:
        raise CRNError(f"need 1 < excess_min < excess_max, got {excess_min}, {excess_max}")
    horizon = formal_ode_horizon(formal)
    formal_time = _ode_time(formal, horizon)
    if formal_time is None:
        return FuelAnswer(None, None, None, None, tolerance, (), "formal undecided")
    until = max(10.0 * formal_time, 1e-9)
    concentration = float(params.concentration)
    tried = []

    def time_at(excess: float):
        p = dataclasses.replace(params, fuel=excess * concentration)
        t = _ode_time(implementation_of(formal, scheme, p).network, until)
        tried.append((excess, t))
        return t

    def close(t) -> bool:
        return t is not None and abs(t - formal_time) <= tolerance * formal_time

    low, high, t_high = None, None, None
    excess = excess_min
    while excess <= excess_max * (1 + 1e-12):
        t = time_at(excess)
        if close(t):
            high, t_high = excess, t
            break
        low = excess
        excess *= 2.0
    if high is None:
        return FuelAnswer(None, None, formal_time, tried[-1][1] if tried else None, tolerance,
                          tuple(tried), "excess_max")
    if low is not None:
        for _ in range(int(refine)):
            mid = math.sqrt(low * high)
            t = time_at(mid)
            if close(t):
                high, t_high = mid, t
            else:
                low = mid
    return FuelAnswer(high, high * concentration, formal_time, t_high, tolerance,
                      tuple(sorted(tried)))


@dataclass(frozen=True)
class LeakAnswer:
    """The largest leak rate constant at which a regime cell stays ``ok``.

    Attributes
    ----------
    leak : float or None
        Largest leak (/M/s) found ``ok``: the leak tolerance (0 when only the
        leak-free cell is ok; None when even that one is not).
    failing : float or None
        Smallest leak found not ``ok`` (None when none up to ``leak_max``
        fails): the tolerance lies in ``[leak, failing)``.
    n, gap : int
    risk : float
    horizon : float
        The decision deadline every leak level is judged by (formal time units).
    tried : tuple of dict
        ``{leak, flag, ode_label, p_wrong, low, high, runs, ok}`` for each level.
    """

    leak: float | None
    failing: float | None
    n: int
    gap: int
    risk: float
    horizon: float
    tried: tuple = field(default=())


def leak_tolerance(formal_cells: Callable[[int, int], Network], n: int, gap: int,
                   scheme: str, params: DnaParameters, *, risk: float = 0.01,
                   runs_max: int = 1000, rng: SeedLike = None, leak_start: float = 0.01,
                   leak_max: float = 1e6,
                   refine: int = 3, until: float | None = None) -> LeakAnswer:
    """Largest leak rate constant at which the implementation's cell (n, gap) stays ``ok``.

    A leak level is ``ok`` when the implementation's mean field decides the
    correct label by the horizon and the regime cell's flag is ``ok``: the
    probability that a stochastic run disagrees with it is below ``risk``
    with 95% confidence (:func:`crn.analyses.regimes.evaluate_cell`). ``uncertain``
    counts as not ok. Every level is judged by the same horizon: by default
    ten times the formal network's mean-field consensus time. Levels grow
    tenfold from ``leak_start`` until one fails, then ``refine`` bisections
    in log leak narrow the bracket (each level's runs are seeded from
    ``rng``, keyed by the cell as in a regime map).

    Parameters
    ----------
    formal_cells : callable (n, gap) -> Network
    n, gap : int
    scheme : str
    params : crn.dna.DnaParameters
        Everything but the leak (``params.leak`` is replaced).
    risk : float
    runs_max : int
    rng : int, SeedSequence or None
    leak_start, leak_max : float
        /M/s.
    refine : int
    until : float, optional

    Returns
    -------
    LeakAnswer

    Raises
    ------
    CRNError
        When ``runs_max`` runs cannot certify ``risk`` at all (:func:`risk_floor`).
    """
    from crn.analyses.probes import ode_decision
    from crn.analyses.regimes import evaluate_cell
    from crn.core.outcome import correct_label
    from crn.runtime.seeds import root_seed

    if not 0 < leak_start < leak_max:
        raise CRNError(f"need 0 < leak_start < leak_max, got {leak_start}, {leak_max}")
    floor = risk_floor(runs_max)
    if floor >= risk:
        raise CRNError(f"runs_max = {runs_max} runs cannot certify a risk of {risk:g} (with no "
                       f"wrong run the 95% upper bound of P(wrong) is {floor:.3g}): every leak "
                       f"level would fail; use at least {runs_for_risk(risk)} runs")
    seq = root_seed(rng)
    formal = formal_cells(int(n), int(gap))
    truth = correct_label(formal)
    if until is None:
        formal_time = ode_decision(formal, formal_ode_horizon(formal))[1]
        until = 10.0 * max(formal_time or 0.0, 1.0)
    cells = ImplementedCells(formal_cells, scheme, params)
    tried = []

    def ok(leak: float) -> bool:
        builder = cells.with_params(leak=float(leak))
        label, _ = ode_decision(builder(n, gap), until)
        if label is None or label != truth:
            tried.append(dict(leak=leak, flag="not decided", ode_label=label, p_wrong=None,
                              low=None, high=None, runs=0, ok=False))
            return False
        cell = evaluate_cell(builder, n, gap, risk=risk, until=until, runs_max=runs_max,
                             method="stochastic", entropy=seq)
        good = cell.flag == "ok" and cell.ode_label == truth
        tried.append(dict(leak=leak, flag=cell.flag, ode_label=cell.ode_label,
                          p_wrong=cell.p_wrong, low=cell.low, high=cell.high, runs=cell.runs,
                          ok=good))
        return good

    answer: dict[str, Any] = dict(n=int(n), gap=int(gap), risk=float(risk),
                                  horizon=float(until))
    if not ok(0.0):
        return LeakAnswer(None, 0.0, tried=tuple(tried), **answer)
    good, bad = 0.0, None
    leak = float(leak_start)
    while leak <= leak_max * (1 + 1e-12):
        if ok(leak):
            good = leak
            leak *= 10.0
        else:
            bad = leak
            break
    if bad is not None and good > 0:
        for _ in range(int(refine)):
            mid = math.sqrt(good * bad)
            if ok(mid):
                good = mid
            else:
                bad = mid
    return LeakAnswer(good, bad, tried=tuple(tried), **answer)


def risk_floor(runs_max: int, confidence: float = 0.95) -> float:
    """Smallest upper bound on P(wrong) that ``runs_max`` sequential runs can give.

    The copy search (:func:`crn.analyses.probes.sample_until_decided`) certifies
    a population when the upper end of its interval (Clopper-Pearson,
    simultaneous over the looks of the schedule up to ``runs_max``) lies below
    the risk. With every run correct the upper end is this floor: a risk at or
    below it cannot be certified by sampling, whatever n.

    Parameters
    ----------
    runs_max : int
    confidence : float, default 0.95

    Returns
    -------
    float
    """
    from crn.analyses.probes import FIRST_ROUND, look_schedule, simultaneous_interval

    runs_max = int(runs_max)
    schedule = look_schedule(runs_max, FIRST_ROUND)
    _, low, _ = simultaneous_interval(schedule[-1], schedule[-1], len(schedule), confidence)
    return 1.0 - float(low)


def runs_for_risk(risk: float, confidence: float = 0.95, limit: int = 10**7) -> int:
    """Fewest runs whose :func:`risk_floor` lies below ``risk`` (searched in steps of 5%).

    Raises
    ------
    CRNError
        When even ``limit`` runs cannot certify ``risk``.
    """
    runs = 1
    while risk_floor(runs, confidence) >= risk:
        runs = max(runs + 1, int(math.ceil(runs * 1.05)))
        if runs > limit:
            raise CRNError(f"no run budget up to {limit:,} certifies a risk of {risk:g}")
    return runs


@dataclass(frozen=True)
class LoadedCells:
    """The cells of a Poisson-loaded sample on a DNA implementation: droplets of one volume.

    Called as ``(n, gap)`` it is the implemented cell of :class:`ImplementedCells`
    (the mean droplet). ``droplets(n)`` builds the droplets of a sample whose
    mean droplet holds n signal molecules, as :class:`crn.analyses.copies.Prober`
    asks for: every droplet has the mean droplet's volume and fuel
    concentration (the fuel is in the sample, not in the signal strands), so a
    droplet that received t molecules has signal concentration ``C t / n`` and
    its formal time unit is ``n / t`` times the mean's (the copy search then
    scales a physical deadline by ``t / n``, as for the formal network).

    Attributes
    ----------
    cells : ImplementedCells
    """

    cells: ImplementedCells

    def __call__(self, n: int, gap: int) -> Network:
        """The implementation's network of cell ``(n, gap)``."""
        return self.cells(n, gap)

    def droplets(self, n: int) -> ImplementedCells:
        """Builder ``(t, gap) -> Network`` of the droplets around a mean of n molecules."""
        from crn.core.units import AVOGADRO

        cells = self.cells
        mean = cells.params_for(int(n))
        volume = cells.volume_liters
        if volume is None:
            volume = int(n) / (float(mean.concentration) * AVOGADRO)
        params = dataclasses.replace(mean, fuel=mean.fuel_molar, fuel_check=False)
        return dataclasses.replace(cells, params=params, volume_liters=volume)


def leak_tolerances(formal_cells: Callable[[int, int], Network], cells: Iterable[Any], scheme: str,
                    params: DnaParameters, *, risk: float = 0.01, runs_max: int = 1000,
                    rng: SeedLike = None, until: float | None = None,
                    progress: Callable[[int], None] | None = None) -> list[LeakAnswer]:
    """The leak tolerance of every cell of a regime map, in the map's order.

    Parameters
    ----------
    formal_cells : callable ``(n, gap) -> Network``
        Builder of the formal cells.
    cells : iterable of objects with ``n`` and ``gap``
        The cells, e.g. ``RegimeMap.cells``.
    scheme, params, risk, runs_max, rng, until :
        As :func:`leak_tolerance` takes them; every cell uses the same ``rng``.
    progress : callable, optional
        Called with the number of cells done after each one.

    Returns
    -------
    list of LeakAnswer
    """
    answers = []
    for i, cell in enumerate(cells):
        answers.append(leak_tolerance(formal_cells, cell.n, cell.gap, scheme, params, risk=risk,
                                      runs_max=runs_max, rng=rng, until=until))
        if progress is not None:
            progress(i + 1)
    return answers


@dataclass(frozen=True)
class ImplementationCopies:
    """Copy numbers of the formal network and of its DNA implementation, side by side.

    Attributes
    ----------
    formal, implemented : crn.analyses.copies.CopiesResult
    verdict : str
        ``more copies`` (the implementation's 95% range lies above the formal
        one), ``fewer copies`` (below it), ``same copies within sampling
        error`` (the ranges overlap), ``no droplet size works``, ``formal
        fails`` (the formal network itself meets the risk at no n) or
        ``implemented`` (no formal search was asked for).
    extra_copies : float or None
        implemented / formal estimate.
    slowdown : float or None
        Median consensus time of the implementation over the formal one at
        their answers: above 1, the implementation leaves less of the
        deadline than the formal kinetics would.
    diagnosis : Diagnosis or None
        Why no droplet size works (mean field at the largest n probed).
    """

    formal: object
    implemented: object
    verdict: str
    extra_copies: float | None
    slowdown: float | None
    diagnosis: Diagnosis | None = None


def implementation_copies(formal_cells: Callable[[int, int], Network], scheme: str,
                          params: DnaParameters, *, volume_liters: float | None = None,
                          gap_fraction: float | None = None, gap: int | None = None,
                          risk: float = 0.01,
                          deadline: float | Callable[[int], float] | None = None,
                          n_max: int = 10**7, method: str = "auto", runs_max: int = 4000,
                          rng: SeedLike = None, workers: int = 1, with_formal: bool = True,
                          loading: str = "fixed",
                          scale_deadline: bool = False,
                          full_network: bool = False) -> ImplementationCopies:
    """Smallest population meeting the risk on the implementation, beside the formal answer.

    Parameters
    ----------
    formal_cells : callable (n, gap) -> Network
    scheme : str
    params : crn.dna.DnaParameters
    volume_liters : float, optional
        A fixed droplet volume (the signal concentration then follows n).
    gap_fraction, gap, risk, deadline, n_max, method, runs_max, rng, workers :
        As :func:`crn.analyses.copies.smallest_n` (the deadline in formal time units,
        or a callable of n).
    with_formal : bool
        Also search the formal network (to compare); otherwise ``formal`` is None.
    loading : {"fixed", "poisson"}
        As :func:`crn.analyses.copies.smallest_n`, for both searches. With
        ``poisson`` n is the mean droplet's content; each droplet has the mean
        droplet's volume and fuel concentration (:class:`LoadedCells`).
    scale_deadline : bool
        Poisson loading with a deadline in physical time: in each droplet's own
        time unit the deadline scales with its total (as
        :func:`crn.analyses.copies.smallest_n`).
    full_network : bool
        Run the implementation's stochastic runs on its full network, not on its
        reduced model (:class:`crn.analyses.implemented.ImplementedCells`).

    Returns
    -------
    ImplementationCopies
    """
    from crn.analyses.copies import smallest_n

    common: dict[str, Any] = dict(gap_fraction=gap_fraction, gap=gap, risk=risk,
                                  deadline=deadline, n_max=n_max, method=method,
                                  runs_max=runs_max, rng=rng, workers=workers, loading=loading,
                                  scale_deadline=scale_deadline)
    cells = ImplementedCells(formal_cells, scheme, params, volume_liters,
                             full_network=full_network)
    formal = smallest_n(formal_cells, **common) if with_formal else None
    implemented = smallest_n(LoadedCells(cells) if loading == "poisson" else cells, **common)
    extra = slowdown = None
    diagnosis = None
    if implemented.estimate is None:
        verdict = "no droplet size works"
        probed = [p.n for p in implemented.probes] or [n_max]
        n = max(probed)
        g = next((p.gap for p in implemented.probes if p.n == n), None)
        if g is not None:
            formal_net = formal_cells(n, g)
            if deadline is None:
                limit = 10.0 * formal_ode_horizon(formal_net)
            else:
                limit = deadline(n) if callable(deadline) else float(deadline)
            diagnosis = diagnose(formal_net, scheme, cells.params_for(n), limit)
            floor = risk_floor(runs_max)
            if diagnosis.reason == "decides" and method != "exact" and floor >= risk:
                diagnosis = dataclasses.replace(diagnosis, reason="too few runs",
                                                runs_max=int(runs_max), risk_floor=floor,
                                                runs_needed=runs_for_risk(risk))
    elif formal is None:
        verdict = "implemented"
    elif formal.estimate is None:
        verdict = "formal fails"
    else:
        extra = implemented.estimate / formal.estimate
        if implemented.low is not None and formal.high is not None and \
                implemented.low > formal.high:
            verdict = "more copies"
        elif implemented.high is not None and formal.low is not None and \
                implemented.high < formal.low:
            verdict = "fewer copies"
        else:
            verdict = "same copies within sampling error"
        if implemented.median_time and formal.median_time:
            slowdown = implemented.median_time / formal.median_time
    return ImplementationCopies(formal, implemented, verdict, extra, slowdown, diagnosis)
