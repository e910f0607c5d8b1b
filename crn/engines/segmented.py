"""Large populations: a DNA implementation's reduced model run in segments on the batched engine.

When the reduced model (:mod:`crn.dna.reduced`) has a protocol form (every
formal reaction two-in two-out, no leak), its signals interact like a
population protocol whose rate constants drift slowly as fuel is used and as
the signals' free fractions shift. A run is cut into segments; in each the
rate constants are held at their value extrapolated to the segment's midpoint
(from the last two segment starts) and the signals run exactly on the batched
engine (:mod:`crn.engines.batched`). Segments are as long as keeps the
relative drift of every rate constant within one segment below
:data:`DRIFT_PER_SEGMENT`, and end at every sample time.

Fuel is updated after each segment from the number of formal firings the
batched engine reports, split among the formal reactions in proportion to
their propensities at the segment's start and end (the split itself is not
sampled: its fluctuation is of relative order ``1 / sqrt(firings)`` of a
fuel change that is itself a fraction ``1 / excess`` of the fuel). The output
step is immediate in this form (see :class:`crn.dna.reduced.ProtocolForm`).
Both approximations sit beside the quasi-steady state's own and are checked
against the reduced model's direct runs (``tests/test_dna_reduced.py``).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from crn.core.network import Network, Reaction
from crn.core.outcome import RunOutcome
from crn.engines.base import Trajectory, check_horizon

__all__ = ["run_segmented", "DRIFT_PER_SEGMENT", "SEGMENTED_FROM"]

#: Largest relative change of a rate constant over one segment (after midpoint extrapolation
#: the error of the frozen constant is of the order of its square).
DRIFT_PER_SEGMENT = 0.01
#: Signal molecules from which the reduced engine runs in segments: there about thirty
#: segments of a few ms each cost less than the direct runs (measured on approximate majority).
SEGMENTED_FROM = 5_000
_FIRST_SEGMENT = 0.05  # formal time units, before the drift is known
_SHORTEST = 1e-3
_LONGEST = 10.0


def _template(net, form) -> Network:
    """The signals' network with the formal reactions (rates set per segment)."""
    names = [net.species[s] for s in form.signals]
    reactions = []
    for f in range(form.complex.shape[0]):
        left, right = {}, {}
        for p in form.reactants[f]:
            left[names[p]] = left.get(names[p], 0) + 1
        for p in form.products[f]:
            right[names[p]] = right.get(names[p], 0) + 1
        reactions.append(Reaction(left, right, 1.0))
    base = Network.from_reactions(f"{net.name} (signals)", names, reactions, volume=net.volume,
                                  initial={}, from_protocol=False)
    labels = np.ascontiguousarray(net.species_label[form.signals], dtype=np.int64)
    labels.flags.writeable = False
    return dataclasses.replace(base, labels=tuple(net.labels), species_label=labels)


_cache: dict[int, tuple] = {}


def _prepared(net):
    red = net.reduction
    hit = _cache.get(id(red))
    if hit is not None and hit[0] is red:
        return hit[1]
    template = _template(net, red.protocol)
    if len(_cache) > 16:
        _cache.clear()
    _cache[id(red)] = (red, template)
    return template


def _rate_constants(x, red, form, volume) -> np.ndarray:
    """Network rate constant of each formal reaction at the folded state x (quasi-steady)."""
    from crn.engines.reduced import _quasi_steady

    frac, _ = _quasi_steady(x, red)
    held = red.cx_species[form.complex]
    return form.first_step * volume * frac[form.partner] * frac[held]


def _propensities(rates, counts, form, volume) -> np.ndarray:
    a, b = counts[form.reactants[:, 0]], counts[form.reactants[:, 1]]
    same = form.reactants[:, 0] == form.reactants[:, 1]
    pairs = np.where(same, a * np.maximum(a - 1.0, 0.0), a * b)
    return rates / volume * pairs


def run_segmented(net, *, until: float, times=None, rng=None,
                  stop_at_consensus: bool = False) -> Trajectory:
    """One run of a reduced model with a protocol form, in segments on the batched engine.

    Parameters
    ----------
    net : crn.dna.reduced.ReducedNetwork
        Its reduction must have a ``protocol`` form.
    until : float
    times : array_like of float, optional
    rng : numpy.random.Generator, int, SeedSequence or None
    stop_at_consensus : bool, default False

    Returns
    -------
    Trajectory
        As :func:`crn.engines.reduced.run_reduced` (folded counts, fuel rounded
        to whole molecules); ``events`` counts formal firings.

    Raises
    ------
    TypeError
        When ``net`` has no reduced model with a protocol form.
    """
    from crn.engines.batched import run_batched

    red = getattr(net, "reduction", None)
    if red is None or red.protocol is None:
        raise TypeError("`net` must carry a reduced model with a protocol form")
    form = red.protocol
    until, times = check_horizon(until, times)
    rng = np.random.default_rng(rng)
    template = _prepared(net)
    volume = float(net.volume)
    x = red.fold(net.initial).astype(np.float64)
    signals = form.signals
    counts = np.empty((times.shape[0], net.n_species), dtype=np.int64)
    t, k, events = 0.0, 0, 0
    first, first_time, last, status = -1, math.nan, -1, "horizon"
    before = None  # (time, rate constants) at the previous segment start
    length = _FIRST_SEGMENT
    while t < until:
        rates = _rate_constants(x, red, form, volume)
        frozen = rates
        if before is not None:
            slope = (rates - before[1]) / (t - before[0])
            scale = np.max(np.abs(slope) / np.maximum(rates, 1e-300))
            length = _LONGEST if scale <= 0 else min(_LONGEST, max(_SHORTEST,
                                                                   DRIFT_PER_SEGMENT / scale))
        end = min(t + length, until)
        while k < times.shape[0] and times[k] <= t:
            counts[k] = np.rint(x)
            k += 1
        if k < times.shape[0]:
            end = min(end, times[k])
        if before is not None:
            frozen = np.maximum(rates + slope * (end - t) / 2.0, 0.0)
        if not (frozen > 0).any():
            status = "silent"
            break
        start = x[signals]
        segment = template.with_initial(start.astype(np.int64)).with_rates(frozen)
        run = run_batched(segment, until=end - t, times=[end - t], rng=rng,
                          stop_at_consensus=stop_at_consensus)
        now = run.counts[-1].astype(np.float64)
        if run.events:
            weight = (_propensities(frozen, start, form, volume)
                      + _propensities(frozen, now, form, volume))
            if weight.sum() > 0:
                x += (run.events * weight / weight.sum()) @ form.change
        x[signals] = now
        events += int(run.events)
        if first < 0 and run.outcome.label is not None:
            first = net.labels.index(run.outcome.label)
            first_time = t + float(run.outcome.time)
        last = -1 if run.outcome.final_label is None else net.labels.index(
            run.outcome.final_label)
        before = (t, rates)
        if run.status != "horizon":
            t = t + run.end_time
            status = run.status
            break
        t = end
    end_time = t if status != "horizon" else until
    while k < times.shape[0]:
        counts[k] = np.rint(x)
        k += 1
    return Trajectory(times=times, counts=counts,
                      outcome=RunOutcome.from_indices(net, first, first_time, last),
                      events=events, end_time=float(end_time), status=status)
