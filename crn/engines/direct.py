"""Exact stochastic simulation of any mass-action network by the direct method (numba).

Gillespie's direct method with the two improvements of the optimised direct
method of Cao, Li and Petzold: after a reaction fires only the propensities
that depend on a species it changed are recomputed (reaction dependency graph),
and the linear search for the next reaction runs over reactions ordered by how
often they fire. The order is kept up to date during the run by moving a fired
reaction one place forward (the sorting variant of McCollum et al. 2006), so no
pre-simulation is needed. Consensus is tracked incrementally from the species
whose counts cross zero, with the rule of :func:`crn.core.outcome.consensus_index`.
"""

from __future__ import annotations

import numba
import numpy as np

from crn.core.network import Network
from crn.core.outcome import RunOutcome
from crn.engines.base import NetworkCache, Trajectory, check_horizon
from crn.engines.kernel_parts import (
    apply_change,
    label_counts,
    label_now,
    record_until,
)

__all__ = ["run_direct", "dependency_graph"]

_STATUS = ("horizon", "silent", "consensus")
_EXACT_SUM_BELOW = 64  # reactions: below this the total propensity is re-summed at every event
_REFRESH_EVERY = 1024  # events between exact re-sums of the total otherwise
# Up to this many reactions the tables are built by the kernels' plain Python versions:
# quicker than loading compiled code for them, which a short command would wait for.
_PYTHON_TABLES_UP_TO = 64


def dependency_graph(net: Network) -> tuple[np.ndarray, np.ndarray]:
    """Reactions whose propensity a reaction's firing can change.

    Reaction j depends on reaction i when i changes the count of a reactant of j.

    Parameters
    ----------
    net : Network

    Returns
    -------
    indptr, indices : ndarray of int64
        CSR layout: the reactions affected by reaction i are
        ``indices[indptr[i]:indptr[i + 1]]``, in increasing order.

    References
    ----------
    Gibson, Bruck, J. Phys. Chem. A 104:1876, 2000 (the dependency graph);
    Cao, Li, Petzold, J. Chem. Phys. 121:4059, 2004.
    """
    ch_ptr, ch_sp, _ = _changes(net)
    args = (ch_ptr, ch_sp, np.ascontiguousarray(net.reactant_species),
            np.ascontiguousarray(net.reactant_counts), net.n_species)
    if net.n_reactions <= _PYTHON_TABLES_UP_TO:
        return _dependencies.py_func(*args)
    return _dependencies(*args)


def _changes(net: Network) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Net change of each reaction, CSR by reaction: species in increasing order, change."""
    args = (np.ascontiguousarray(net.reactant_species), np.ascontiguousarray(net.reactant_counts),
            np.ascontiguousarray(net.product_species), np.ascontiguousarray(net.product_counts),
            net.n_species)
    if net.n_reactions <= _PYTHON_TABLES_UP_TO:
        return _net_changes.py_func(*args)
    return _net_changes(*args)


# Both tables are built in compiled code rather than with scipy.sparse, whose import
# would cost more than a short run of the command line.
@numba.njit(cache=True)
def _net_changes(rs, rc, ps, pc, n_species):
    n_reactions = rs.shape[0]
    delta = np.zeros(n_species, dtype=np.int64)
    seen = np.zeros(n_species, dtype=np.bool_)
    touched = np.empty(rs.shape[1] + ps.shape[1], dtype=np.int64)
    ptr = np.zeros(n_reactions + 1, dtype=np.int64)
    sp_out = np.empty(n_reactions * touched.shape[0], dtype=np.int64)
    d_out = np.empty(n_reactions * touched.shape[0], dtype=np.int64)
    k = 0
    for j in range(n_reactions):
        m = 0
        for col in range(rs.shape[1]):
            s = rs[j, col]
            if s >= 0:
                delta[s] -= rc[j, col]
                if not seen[s]:
                    seen[s] = True
                    touched[m] = s
                    m += 1
        for col in range(ps.shape[1]):
            s = ps[j, col]
            if s >= 0:
                delta[s] += pc[j, col]
                if not seen[s]:
                    seen[s] = True
                    touched[m] = s
                    m += 1
        order = np.sort(touched[:m])
        for i in range(m):
            s = order[i]
            if delta[s] != 0:
                sp_out[k] = s
                d_out[k] = delta[s]
                k += 1
            delta[s] = 0
            seen[s] = False
        ptr[j + 1] = k
    return ptr, sp_out[:k].copy(), d_out[:k].copy()


@numba.njit(cache=True)
def _dependencies(ch_ptr, ch_sp, rs, rc, n_species):
    n_reactions = rs.shape[0]
    # reactions using each species as a reactant, CSR by species
    use_ptr = np.zeros(n_species + 1, dtype=np.int64)
    for j in range(n_reactions):
        for col in range(rs.shape[1]):
            if rs[j, col] >= 0 and rc[j, col] != 0:
                use_ptr[rs[j, col] + 1] += 1
    for s in range(n_species):
        use_ptr[s + 1] += use_ptr[s]
    fill = use_ptr[:-1].copy()
    users = np.empty(use_ptr[-1], dtype=np.int64)
    for j in range(n_reactions):
        for col in range(rs.shape[1]):
            s = rs[j, col]
            if s >= 0 and rc[j, col] != 0:
                users[fill[s]] = j
                fill[s] += 1
    mark = np.full(n_reactions, -1, dtype=np.int64)
    ptr = np.zeros(n_reactions + 1, dtype=np.int64)
    out = np.empty(0, dtype=np.int64)
    k = 0
    found = np.empty(n_reactions, dtype=np.int64)
    for i in range(n_reactions):
        m = 0
        for a in range(ch_ptr[i], ch_ptr[i + 1]):
            s = ch_sp[a]
            for b in range(use_ptr[s], use_ptr[s + 1]):
                j = users[b]
                if mark[j] != i:
                    mark[j] = i
                    found[m] = j
                    m += 1
        if k + m > out.shape[0]:
            grown = np.empty(max(2 * out.shape[0], k + m), dtype=np.int64)
            grown[:k] = out[:k]
            out = grown
        out[k:k + m] = np.sort(found[:m])
        k += m
        ptr[i + 1] = k
    return ptr, out[:k].copy()


@numba.njit(cache=True)
def _propensity(j, x, rs, rc, c):
    a = c[j]
    for col in range(rs.shape[1]):
        s = rs[j, col]
        if s < 0:
            break
        m = rc[j, col]
        xs = x[s]
        if xs < m:
            return 0.0
        for i in range(m):
            a *= float(xs - i)
    return a


@numba.njit(cache=True)
def _all_propensities(x, rs, rc, c):
    """Every reaction's propensity at x, and how many are positive."""
    a = np.empty(c.shape[0])
    positive = 0
    for j in range(c.shape[0]):
        a[j] = _propensity(j, x, rs, rc, c)
        if a[j] > 0.0:
            positive += 1
    return a, positive


@numba.njit(cache=True, nogil=True)  # nogil: Ctrl-C is seen during a run
def _kernel(rs, rc, c, ch_ptr, ch_sp, ch_d, dep_ptr, dep_idx, species_label, n_labels,
            x0, times, until, stop_at_consensus, rng):
    """One direct-method run.

    The steps it shares with the reduced model's kernel (:mod:`crn.engines.reduced`) are
    in :mod:`crn.engines.kernel_parts`, inlined (``inline="always"``: as plain calls they
    cost the direct method a third of its speed, inlined they cost nothing measurable).

    Data layout: reactants padded per reaction (``rs`` species, ``rc``
    multiplicities), rate constants ``c``; the net change of each reaction as
    CSR (``ch_ptr``, ``ch_sp``, ``ch_d``) and the reactions whose propensity
    each reaction changes as CSR (``dep_ptr``, ``dep_idx``). ``a`` holds the
    propensities, ``order`` the search order (sorting direct method: a
    reaction that fires moves one place forward), ``present``/``unlabeled``
    count the species with agents per label, so consensus is known without a
    scan.

    Each step draws two uniforms from ``rng``: the waiting time
    (``-log(1 - u) / a0``) and the reaction (a linear search for ``u * a0``
    along ``order``). It then records the sample times passed, applies the
    change, updates the dependent propensities and the total (re-summed
    exactly every ``_REFRESH_EVERY`` events, or at once for few reactions),
    and checks consensus. Returns the same tuple as the batched kernel.
    """
    n_species = x0.shape[0]
    n_reactions = c.shape[0]
    x = x0.copy()
    counts = np.empty((times.shape[0], n_species), dtype=np.int64)
    a, positive = _all_propensities(x, rs, rc, c)  # positive: kept exactly, the count of a > 0
    order = np.arange(n_reactions)
    exact_sum = n_reactions < _EXACT_SUM_BELOW

    present, unlabeled = label_counts(x, species_label, n_labels)
    first_label = label_now(present, unlabeled, n_labels)
    first_time = 0.0 if first_label >= 0 else np.nan

    t = 0.0
    events = 0
    k = 0  # next sample
    status = 0
    a0 = a.sum()
    a0_ref = a0  # total at the last exact re-sum
    if stop_at_consensus and first_label >= 0:
        status = 2
    while status == 0:
        if positive == 0:
            status = 1
            break
        if not exact_sum and (events % _REFRESH_EVERY == 0 or a0 < 1e-6 * a0_ref or a0 <= 0.0):
            # the incremental total drifts by rounding: re-sum now and then, and whenever
            # it has fallen far below the last exact value
            a0 = a.sum()
            a0_ref = a0
        t_next = t - np.log(1.0 - rng.random()) / a0
        if t_next > until:
            break
        k = record_until(counts, times, k, x, t_next)
        target = rng.random() * a0
        acc = 0.0
        pos = -1
        last_positive = -1
        for p in range(n_reactions):
            j = order[p]
            if a[j] > 0.0:
                last_positive = p
                acc += a[j]
                if acc > target:
                    pos = p
                    break
        if pos < 0:  # rounding pushed the target past the sum
            pos = last_positive
        if pos < 0:  # cannot happen while `positive` > 0; stop rather than loop
            status = 1
            break
        r = order[pos]
        if pos > 0:
            order[pos] = order[pos - 1]
            order[pos - 1] = r
        unlabeled = apply_change(x, r, ch_ptr, ch_sp, ch_d, species_label, present, unlabeled)
        for i in range(dep_ptr[r], dep_ptr[r + 1]):
            j = dep_idx[i]
            new = _propensity(j, x, rs, rc, c)
            if not exact_sum:
                a0 += new - a[j]
            if (new > 0.0) != (a[j] > 0.0):
                positive += 1 if new > 0.0 else -1
            a[j] = new
        if exact_sum:
            a0 = a.sum()
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


def run_direct(net: Network, *, until: float, times=None, rng=None,
               stop_at_consensus: bool = False) -> Trajectory:
    """One exact stochastic run of a mass-action network (optimised direct method).

    Parameters
    ----------
    net : Network
        Any mass-action network (reactions of any order, including ``0 -> X``).
    until : float
        Horizon in network time (parallel time for a protocol's network).
    times : array_like of float, shape (n_times,), optional
        Sample times in ``[0, until]``, non-decreasing; default 101 evenly
        spaced points. Only these states are recorded, not every event.
    rng : numpy.random.Generator, int, SeedSequence or None
        The generator is passed to the numba kernel, which draws from it
        directly: the same seed gives the same run.
    stop_at_consensus : bool, default False
        Stop at the first consensus (the later samples repeat that state).

    Returns
    -------
    Trajectory
        Counts at ``times`` (the state after all events up to each time),
        the outcome (first consensus label and time, label at the end), events
        fired, the end time (horizon, time of silence or of consensus) and the
        status ``"horizon"``, ``"silent"`` or ``"consensus"``.

    Raises
    ------
    ValueError
        For a non-positive or infinite ``until`` or bad ``times``.

    References
    ----------
    Gillespie, "Exact stochastic simulation of coupled chemical reactions",
    J. Phys. Chem. 81:2340, 1977. Cao, Li, Petzold, "Efficient formulation of
    the stochastic simulation algorithm for chemically reacting systems",
    J. Chem. Phys. 121:4059, 2004. McCollum, Peterson, Cox, Simpson, Samatova,
    "The sorting direct method for stochastic simulation of biochemical
    systems with varying reaction execution behavior", Comput. Biol. Chem.
    30:39, 2006.

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> net = load_model("models/epidemic.toml", {"n": 100}).network
    >>> run = run_direct(net, until=50.0, rng=1, stop_at_consensus=True)
    >>> run.outcome.label, run.status
    ('I', 'consensus')
    """
    until, times = check_horizon(until, times)
    rng = np.random.default_rng(rng)
    arrays = _prepared(net)
    counts, first, first_time, last, events, end_time, status = _kernel(
        *arrays, np.ascontiguousarray(net.initial, dtype=np.int64), times, until,
        bool(stop_at_consensus), rng)
    return Trajectory(times=times, counts=counts,
                      outcome=RunOutcome.from_indices(net, int(first), float(first_time),
                                                      int(last)),
                      events=int(events), end_time=float(end_time), status=_STATUS[status])


def _kernel_arrays(net: Network) -> tuple:
    """Kernel arrays of a network."""
    orders = net.orders.astype(np.float64)
    c = np.ascontiguousarray(net.rates / net.volume ** (orders - 1.0), dtype=np.float64)
    ch_ptr, ch_sp, ch_d = _changes(net)
    dep_ptr, dep_idx = dependency_graph(net)
    arrays = (np.ascontiguousarray(net.reactant_species), np.ascontiguousarray(net.reactant_counts),
              c, ch_ptr, ch_sp, ch_d, dep_ptr, dep_idx,
              np.ascontiguousarray(net.species_label, dtype=np.int64), len(net.labels))
    return arrays


_prepared = NetworkCache(_kernel_arrays)
"""Kernel arrays of a network, built once per (immutable) network object."""
