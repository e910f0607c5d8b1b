"""The designer's questions about a DNA implementation, answered from the engines.

* :func:`fuel_for_time`: how much fuel excess (fuel concentration over the
  signal concentration) makes the implementation's mean-field decision time
  come within a tolerance (10%) of the formal network's.
* :func:`leak_tolerance`: the largest leak rate constant at which a regime
  cell stays ``ok`` at the given risk with the correct decision.
* :func:`implementation_copies`: the copy-number search on the implementation
  beside the formal one: more copies, a later decision (a shorter deadline
  left for the formal kinetics), or no droplet size at all and why (fuel runs
  out, leak dominates).

Pure functions: no printing, no files.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass, field

from crn.analyses.implemented import (
    Diagnosis,
    ImplementedCells,
    diagnose,
    formal_ode_horizon,
    implementation_of,
)
from crn.core.errors import CRNError
from crn.core.network import Network

__all__ = ["FuelAnswer", "fuel_for_time", "LeakAnswer", "leak_tolerance",
           "ImplementationCopies", "implementation_copies"]


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


def fuel_for_time(formal: Network, scheme: str, params, *, tolerance: float = 0.1,
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
                   scheme: str, params, *, risk: float = 0.01, runs_max: int = 1000,
                   rng=None, leak_start: float = 0.01, leak_max: float = 1e6,
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
    """
    import numpy as np

    from crn.analyses.probes import ode_decision
    from crn.analyses.regimes import evaluate_cell
    from crn.core.outcome import correct_label

    if not 0 < leak_start < leak_max:
        raise CRNError(f"need 0 < leak_start < leak_max, got {leak_start}, {leak_max}")
    seq = rng if isinstance(rng, np.random.SeedSequence) else np.random.SeedSequence(rng)
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

    answer = dict(n=int(n), gap=int(gap), risk=float(risk), horizon=float(until))
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


def implementation_copies(formal_cells: Callable[[int, int], Network], scheme: str, params, *,
                          volume_liters: float | None = None, gap_fraction=None, gap=None,
                          risk: float = 0.01, deadline=None, n_max: int = 10**7,
                          method: str = "auto", runs_max: int = 4000, rng=None,
                          workers: int = 1, with_formal: bool = True) -> ImplementationCopies:
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

    Returns
    -------
    ImplementationCopies
    """
    from crn.analyses.copies import smallest_n

    common = dict(gap_fraction=gap_fraction, gap=gap, risk=risk, deadline=deadline, n_max=n_max,
                  method=method, runs_max=runs_max, rng=rng, workers=workers)
    cells = ImplementedCells(formal_cells, scheme, params, volume_liters)
    formal = smallest_n(formal_cells, **common) if with_formal else None
    implemented = smallest_n(cells, **common)
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
