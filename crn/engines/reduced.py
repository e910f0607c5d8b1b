"""Exact simulation of a DNA implementation's reduced model (numba).

The model (:mod:`crn.dna.reduced`) has the fast reversible bindings of the
implementation at quasi-steady state (Rao and Arkin, J. Chem. Phys.
118:4999, 2003); this engine runs its slow reactions by Gillespie's direct
method, recomputing the quasi-steady state and every slow propensity after each
event (an implementation has few slow reactions per formal reaction). The
process it samples is the reduced Markov chain exactly; its distance from the
full network is the approximation's, bounded by the fuel excess.

State: the full network's species with every complex folded into its signal,
gate and buffer (complexes at 0), so samples, consensus and fuel read as on the
full network with each bound signal counted as its signal.
"""

from __future__ import annotations

import numba
import numpy as np

from crn.core.outcome import RunOutcome
from crn.engines.base import Trajectory, check_horizon
from crn.engines.kernel_parts import (
    apply_change,
    label_counts,
    label_now,
    record_until,
)

__all__ = ["run_reduced", "reduced_propensities"]

_STATUS = ("horizon", "silent", "consensus")
_SWEEPS = 3  # fixed-point sweeps of the quasi-steady state (the corrections are O(1/excess))
_KIND_SIGNAL, _KIND_COMPLEX, _KIND_GATE, _KIND_BUFFER = 1, 2, 3, 4


@numba.njit(cache=True, inline="always")
def _steady(x, kind, ref, cx_signal, cx_gate, cx_buffer, cx_set, cx_forward, cx_back,
            set_signal, set_ptr, set_cx, use_ptr, use_rate, use_partner, share, free, bound):
    """Quasi-stationary share of each complex and free fraction of each signal, in place."""
    n_cx = cx_signal.shape[0]
    for g in range(set_signal.shape[0]):
        free[g] = 1.0
    for j in range(n_cx):
        bound[j] = 0.0
    for _ in range(_SWEEPS):
        for j in range(n_cx):
            gate = x[cx_gate[j]] - bound[j]
            if gate < 0.0:
                gate = 0.0
            alpha = cx_forward[j] * gate
            beta = cx_back[j] * (x[cx_buffer[j]] + bound[j])
            gamma = 0.0
            for u in range(use_ptr[j], use_ptr[j + 1]):
                p = use_partner[u]
                if p < 0:
                    gamma += use_rate[u]
                elif kind[p] == _KIND_SIGNAL:
                    gamma += use_rate[u] * free[ref[p]] * x[p]
                else:
                    gamma += use_rate[u] * x[p]
            leave = beta + gamma
            share[j] = alpha / leave if leave > 0.0 else 0.0
        for g in range(set_signal.shape[0]):
            z = 1.0
            for a in range(set_ptr[g], set_ptr[g + 1]):
                z += share[set_cx[a]]
            free[g] = 1.0 / z
        for j in range(n_cx):
            bound[j] = share[j] * free[cx_set[j]] * x[cx_signal[j]]


@numba.njit(cache=True, inline="always")
def _effective(x, kind, ref, cx_set, used, share, free, bound, frac, eff):
    """Mean count and share of its signal's total of every species a slow reaction uses."""
    for i in range(used.shape[0]):
        s = used[i]
        k = kind[s]
        if k == _KIND_SIGNAL:
            frac[s] = free[ref[s]]
            eff[s] = frac[s] * x[s]
        elif k == _KIND_COMPLEX:
            j = ref[s]
            frac[s] = share[j] * free[cx_set[j]]
            eff[s] = bound[j]
        elif k == _KIND_GATE:
            v = x[s] - bound[ref[s]]
            eff[s] = v if v > 0.0 else 0.0
        elif k == _KIND_BUFFER:
            eff[s] = x[s] + bound[ref[s]]
        else:
            eff[s] = x[s]


@numba.njit(cache=True, inline="always")
def _propensity(r, x, rs, rc, c, kind, group, set_signal, frac, eff):
    """Mass-action propensity of slow reaction r averaged over the quasi-steady state.

    Two states of one signal: ``T (T - 1) p_a p_b`` (multinomial second moment);
    otherwise the product of the mean counts (independent signals; gates and
    buffers are far above their fluctuations at the validated fuel excess).
    """
    a = c[r]
    s1 = rs[r, 0]
    if s1 < 0:
        return a
    s2 = rs[r, 1] if rs.shape[1] > 1 else -1
    if rc[r, 0] == 2:
        g = group[s1]
        if g >= 0:
            t = x[set_signal[g]]
            return a * t * (t - 1.0) * frac[s1] * frac[s1] if t > 1.0 else 0.0
        if kind[s1] == 0:
            v = x[s1]
            return a * v * (v - 1.0) if v > 1.0 else 0.0
        return a * eff[s1] * eff[s1]
    if s2 < 0:
        return a * eff[s1]
    g = group[s1]
    if g >= 0 and g == group[s2]:
        t = x[set_signal[g]]
        return a * t * (t - 1.0) * frac[s1] * frac[s2] if t > 1.0 else 0.0
    return a * eff[s1] * eff[s2]


@numba.njit(cache=True, nogil=True)  # nogil: Ctrl-C is seen during a run
def _kernel(kind, ref, group, used, cx_signal, cx_gate, cx_buffer, cx_set, cx_forward,
            cx_back, set_signal, set_ptr, set_cx, use_ptr, use_rate, use_partner, rs, rc, c,
            ch_ptr, ch_sp, ch_d, species_label, n_labels, x0, times, until, stop_at_consensus, rng):
    """One direct-method run of the slow reactions, the quasi-steady state recomputed per event.

    Draws as the direct engine's kernel does (the waiting time, then a linear search for
    ``u * a0`` over the slow reactions in order) and shares its steps for the state,
    consensus and samples (:mod:`crn.engines.kernel_parts`); returns the same tuple.
    """
    n_species = x0.shape[0]
    n_slow = c.shape[0]
    n_cx = cx_signal.shape[0]
    x = x0.copy()
    xf = x.astype(np.float64)
    counts = np.empty((times.shape[0], n_species), dtype=np.int64)
    share = np.zeros(n_cx)
    bound = np.zeros(n_cx)
    free = np.ones(set_signal.shape[0])
    a = np.zeros(n_slow)
    frac = np.ones(n_species)
    eff = np.zeros(n_species)

    present, unlabeled = label_counts(x, species_label, n_labels)
    first_label = label_now(present, unlabeled, n_labels)
    first_time = 0.0 if first_label >= 0 else np.nan
    t = 0.0
    events = 0
    k = 0
    status = 0
    if stop_at_consensus and first_label >= 0:
        status = 2
    while status == 0:
        _steady(xf, kind, ref, cx_signal, cx_gate, cx_buffer, cx_set, cx_forward, cx_back,
                set_signal, set_ptr, set_cx, use_ptr, use_rate, use_partner, share, free, bound)
        _effective(xf, kind, ref, cx_set, used, share, free, bound, frac, eff)
        a0 = 0.0
        for r in range(n_slow):
            a[r] = _propensity(r, xf, rs, rc, c, kind, group, set_signal, frac, eff)
            a0 += a[r]
        if a0 <= 0.0:
            status = 1
            break
        t_next = t - np.log(1.0 - rng.random()) / a0
        if t_next > until:
            break
        k = record_until(counts, times, k, x, t_next)
        target = rng.random() * a0
        acc = 0.0
        pick = -1
        for r in range(n_slow):
            if a[r] > 0.0:
                pick = r
                acc += a[r]
                if acc > target:
                    break
        unlabeled = apply_change(x, pick, ch_ptr, ch_sp, ch_d, species_label, present,
                                 unlabeled)
        for i in range(ch_ptr[pick], ch_ptr[pick + 1]):
            xf[ch_sp[i]] = float(x[ch_sp[i]])
        t = t_next
        events += 1
        label = label_now(present, unlabeled, n_labels)
        if label >= 0 and first_label < 0:
            first_label = label
            first_time = t
            if stop_at_consensus:
                status = 2
    end_time = t if status != 0 else until
    record_until(counts, times, k, x, np.inf)
    last = label_now(present, unlabeled, n_labels)
    return counts, first_label, first_time, last, events, end_time, status


def _quasi_steady(x, red) -> tuple[np.ndarray, np.ndarray]:
    """Quasi-steady state of reduction ``red`` at the folded state x (float64).

    Returns ``(frac, eff)``, indexed by species: the share of its signal's total a signal
    or complex species holds, and the mean count of every species a slow reaction uses.
    """
    n_cx = red.n_complexes
    share, bound = np.zeros(n_cx), np.zeros(n_cx)
    free = np.ones(red.set_signal.shape[0])
    frac, eff = np.ones(x.shape[0]), np.zeros(x.shape[0])
    _steady(x, red.kind, red.ref, red.cx_signal, red.cx_gate, red.cx_buffer, red.cx_set,
            red.cx_forward, red.cx_back, red.set_signal, red.set_ptr, red.set_cx, red.use_ptr,
            red.use_rate, red.use_partner, share, free, bound)
    _effective(x, red.kind, red.ref, red.cx_set, red.used, share, free, bound, frac, eff)
    return frac, eff


def reduced_propensities(net, counts) -> np.ndarray:
    """Propensities of the reduced model's slow reactions at a state.

    Parameters
    ----------
    net : crn.dna.reduced.ReducedNetwork
    counts : array_like of int, shape (n_species,)
        Counts of the full network's species (complexes are folded first).

    Returns
    -------
    ndarray of float64, shape (n_slow,)
        In the order of ``net.reduction.slow`` (indices of the full network's reactions).
    """
    red = getattr(net, "reduction", None)
    if red is None:
        raise TypeError("`net` must carry a reduced model (crn.dna.reduced.reduced_network)")
    x = red.fold(counts).astype(np.float64)
    frac, eff = _quasi_steady(x, red)
    return np.array([_propensity(r, x, red.reactant_species, red.reactant_counts, red.constants,
                                 red.kind, red.group, red.set_signal, frac, eff)
                     for r in range(red.constants.shape[0])])


def run_reduced(net, *, until: float, times=None, rng=None,
                stop_at_consensus: bool = False) -> Trajectory:
    """One exact run of a DNA implementation's reduced model (quasi-steady-state binding).

    Parameters
    ----------
    net : crn.dna.reduced.ReducedNetwork
        A full implementation network carrying its reduced model.
    until : float
        Horizon in network time (the formal network's time unit).
    times : array_like of float, shape (n_times,), optional
        Sample times in ``[0, until]``; default 101 evenly spaced points.
    rng : numpy.random.Generator, int, SeedSequence or None
    stop_at_consensus : bool, default False

    Returns
    -------
    Trajectory
        Counts of the full network's species at ``times`` with bound signals
        folded into their signal (complexes 0, their gates and buffers as
        unbound); outcome, slow events fired, end time and status as for the
        other engines.

    Raises
    ------
    TypeError
        When ``net`` carries no reduced model.
    ValueError
        For a non-positive or infinite ``until`` or bad ``times``.

    References
    ----------
    Rao, Arkin, "Stochastic chemical kinetics and the quasi-steady-state
    assumption: application to the Gillespie algorithm", J. Chem. Phys.
    118:4999, 2003. Gillespie, J. Phys. Chem. 81:2340, 1977.

    Examples
    --------
    >>> from crn.analyses.implemented import implementation_of
    >>> from crn.dna import DnaParameters
    >>> from crn.dna.reduced import reduced_network
    >>> from crn.io.models import load_model
    >>> formal = load_model("models/approximate_majority.toml", {"n": 40, "gap": 10}).network
    >>> impl = implementation_of(formal, "ssw", DnaParameters(rate=1e5, concentration=1e-8))
    >>> run = run_reduced(reduced_network(impl), until=200.0, rng=1, stop_at_consensus=True)
    >>> run.status
    'consensus'
    """
    until, times = check_horizon(until, times)
    red = getattr(net, "reduction", None)
    if red is None:
        raise TypeError("`net` must carry a reduced model (crn.dna.reduced.reduced_network)")
    if red.protocol is not None:
        from crn.engines.segmented import SEGMENTED_FROM, run_segmented

        if int(np.asarray(net.initial)[red.protocol.signals].sum()) >= SEGMENTED_FROM:
            return run_segmented(net, until=until, times=times, rng=rng,
                                 stop_at_consensus=stop_at_consensus)
    rng = np.random.default_rng(rng)
    x0 = red.fold(net.initial)
    counts, first, first_time, last, events, end_time, status = _kernel(
        red.kind, red.ref, red.group, red.used, red.cx_signal, red.cx_gate, red.cx_buffer,
        red.cx_set, red.cx_forward, red.cx_back, red.set_signal, red.set_ptr, red.set_cx,
        red.use_ptr, red.use_rate, red.use_partner, red.reactant_species,
        red.reactant_counts,
        red.constants, red.change_ptr, red.change_species, red.change_delta,
        np.ascontiguousarray(net.species_label, dtype=np.int64), len(net.labels), x0, times,
        until, bool(stop_at_consensus), rng)
    return Trajectory(times=times, counts=counts,
                      outcome=RunOutcome.from_indices(net, int(first), float(first_time),
                                                      int(last)),
                      events=int(events), end_time=float(end_time), status=_STATUS[status])
