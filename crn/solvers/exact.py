"""Exact outcome probabilities and consensus times of small populations.

The network's continuous-time Markov chain is enumerated
(:mod:`crn.solvers.configurations`) and solved with sparse linear algebra: absorption
probabilities into the configurations of stable consensus, the first two
moments of the absorption time, and (finite state projection) the
probability of each decision by a deadline. Times are network time, which is
parallel time for a protocol, the clock of the ODE and of the stochastic
engines.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numba
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.core.outcome import NO_CONSENSUS, correct_label
from crn.solvers.configurations import (
    DEFAULT_MAX_STATES,
    StateSpace,
    consensus_labels,
    enumerate_configurations,
    estimate_configurations,
    estimate_memory,
)

if TYPE_CHECKING:
    from collections.abc import Callable

__all__ = [
    "DIRECT_LIMIT",
    "DISSECTION_MIN",
    "ExactResult",
    "exact_outcomes",
    "stable_consensus",
    "transient_outcomes",
]

#: Largest number of transient configurations solved by SuperLU under
#: ``method="auto"`` when nested dissection does not apply; larger systems use
#: ILU-preconditioned Krylov solvers.
DIRECT_LIMIT = 2_000_000
#: Smallest system for which ``method="auto"`` prefers nested dissection over SuperLU.
DISSECTION_MIN = 20_000
#: ``method="auto"`` falls back to SuperLU when the dissection's factors would hold
#: more than this many entries per row (lattices of many dimensions) ...
_DISSECTION_ENTRIES_PER_ROW = 400
#: ... or a dense front of more rows than this (its square must fit in memory).
_DISSECTION_FRONT_MAX = 16_000
_ITERATIVE_RTOL = 1e-10  # on the preconditioned residual of GMRES
_RESIDUAL_WARNING = 1e-8  # true relative residual above which a solve is flagged


@dataclass(frozen=True)
class ExactResult:
    """Exact decision probabilities and consensus time of one initial configuration.

    Attributes
    ----------
    states : int
        Configurations reachable from the initial one.
    transitions : int
        Transitions between them.
    probabilities : dict of str to float
        Probability of ending in stable consensus on each label, and under
        ``"none"`` of never reaching stable consensus.
    expected_time : float
        Mean time to reach stable consensus, conditioned on reaching it (the
        plain mean when ``probabilities["none"] == 0``); NaN if it is never reached.
    time_std : float
        Standard deviation of that time (same conditioning).
    correct : str or None
        The right answer (:func:`crn.core.outcome.correct_label`), ``"tie"``, or
        None when the model asks no question.
    absorbing : int
        Configurations of stable consensus.
    method : str
        ``"trivial"``, ``"dissection"`` (multifrontal LU in nested-dissection
        order, :mod:`crn.solvers.multifrontal`), ``"direct"`` (SuperLU) or
        ``"iterative"``.
    residual : float
        Largest relative residual of the linear solves.
    status : int
        0 on success, 1 when an iterative solve did not reach its tolerance.
    message : str
    """

    states: int
    transitions: int
    probabilities: dict[str, float]
    expected_time: float
    time_std: float
    correct: str | None = None
    absorbing: int = 0
    method: str = "direct"
    residual: float = 0.0
    status: int = 0
    message: str = ""

    @property
    def p_wrong(self) -> float | None:
        """Probability of a stable consensus on a label other than the correct one, or None."""
        if self.correct is None:
            return None
        return float(sum(p for label, p in self.probabilities.items()
                         if label not in (self.correct, NO_CONSENSUS)))


@numba.njit(cache=True)
def _backward_reach(indptr, indices, seeds):
    """Mark every node that can reach a seed, given the reversed graph in CSR form."""
    n = seeds.shape[0]
    reached = seeds.copy()
    queue = np.empty(n, dtype=np.int64)
    tail = 0
    for i in range(n):
        if seeds[i]:
            queue[tail] = i
            tail += 1
    head = 0
    while head < tail:
        v = queue[head]
        head += 1
        for k in range(indptr[v], indptr[v + 1]):
            u = indices[k]
            if not reached[u]:
                reached[u] = True
                queue[tail] = u
                tail += 1
    return reached


def _reverse(space: StateSpace) -> sp.csr_matrix:
    n = space.n_states
    graph = sp.csr_matrix((np.ones(space.n_transitions, dtype=np.int8), (space.dst, space.src)),
                          shape=(n, n))
    graph.sum_duplicates()
    return graph


def _can_reach(reverse: sp.csr_matrix, seeds: np.ndarray) -> np.ndarray:
    return _backward_reach(reverse.indptr.astype(np.int64), reverse.indices.astype(np.int64),
                           np.ascontiguousarray(seeds, dtype=np.bool_))


def stable_consensus(net: Network, space: StateSpace,
                     reverse: sp.csr_matrix | None = None) -> np.ndarray:
    """Label of the stable consensus of each configuration, or -1.

    A configuration is in stable consensus on L when every agent reports L
    (:func:`crn.core.outcome.consensus_index`) and every configuration reachable
    from it does too. It is unstable exactly when it can reach a transition
    that changes the consensus label; in a truncated enumeration, reaching a
    transition that leaves the enumerated set also counts as unstable.

    Parameters
    ----------
    net : Network
    space : StateSpace

    Returns
    -------
    ndarray of int64, shape (n_states,)
        Index into ``net.labels``, or -1.
    """
    labels = consensus_labels(net, space.states)
    changes = np.zeros(space.n_states, dtype=bool)
    changes[space.src[labels[space.src] != labels[space.dst]]] = True
    changes |= space.outflow > 0
    if reverse is None:
        reverse = _reverse(space)
    unstable = _can_reach(reverse, changes)
    return np.where(unstable, -1, labels)


def _limit_check(net: Network, limit: int) -> int:
    estimate = estimate_configurations(net)
    if estimate > limit:
        gib = estimate_memory(net, estimate) / 2**30
        raise CRNError(
            f"{net.name}: up to {estimate:,} configurations (about {gib:,.1f} GiB) exceed the "
            f"limit of {limit:,}; lower n or raise max_states (--max-states) if memory allows"
        )
    return estimate


_METHODS = ("auto", "dissection", "direct", "iterative")


def exact_outcomes(net: Network, *, max_states: int | None = None, method: str = "auto",
                   progress: Callable[[int, int], None] | None = None,
                   absorb: str = "stable") -> ExactResult:
    """Exact probability of each stable consensus and moments of the time to reach it.

    Let A_L be the configurations of stable consensus on label L (closed
    sets of the chain) and T the configurations that can reach some A_L but
    are in none. On T the absorption probabilities h_L solve
    ``-Q_TT h_L = Q_{T,A_L} 1``; with ``h = sum_L h_L``, the moments of the
    absorption time tau satisfy ``-Q_TT u = h`` (``u = E[tau; absorbed]``) and
    ``-Q_TT w = u`` (``E[tau^2; absorbed] = 2 w``). Configurations that cannot
    reach any A_L make up ``"none"``.

    Parameters
    ----------
    net : Network
        Its ``initial`` counts are the starting configuration; the population
        must be bounded by a conservation law (always true for a protocol).
    max_states : int, optional
        Refuse larger state spaces (default :data:`~crn.solvers.configurations.DEFAULT_MAX_STATES`).
        The estimate of :func:`~crn.solvers.configurations.estimate_configurations`
        is checked before anything is enumerated.
    method : {"auto", "dissection", "direct", "iterative"}
        Multifrontal LU in a nested-dissection order of the configuration
        lattice, sparse LU (SuperLU with minimum-degree ordering) or
        ILU-preconditioned GMRES. ``"auto"`` uses nested dissection from
        :data:`DISSECTION_MIN` transient configurations whenever its factors
        stay small (lattices of few dimensions: every protocol of a handful of
        states), else SuperLU up to :data:`DIRECT_LIMIT` and GMRES beyond.
    progress : callable, optional
        ``progress(done, total)`` during the enumeration.
    absorb : {"stable", "first"}
        ``"stable"`` (default): absorption into stable consensus, as above.
        ``"first"``: every consensus configuration absorbs, so the answer is
        the label and time of the *first* consensus, as the stochastic engines
        report it. The two agree whenever consensus is never lost (every
        bundled model); they differ for protocols that can leave consensus.

    Returns
    -------
    ExactResult

    Raises
    ------
    CRNError
        When the state space is unbounded or larger than ``max_states``.
    ValueError
        For an unknown ``method``.

    References
    ----------
    Kemeny, Snell, "Finite Markov Chains", 1960 (absorption probabilities and
    times of absorbing chains); Norris, "Markov Chains", 1997, sec. 3.3.

    Examples
    --------
    Approximate majority with 12 X against 8 Y: the chain over all 230
    configurations gives the chance that the initial majority wins.

    >>> from crn.io.models import load_model
    >>> net = load_model("models/approximate_majority.toml", {"n": 20, "gap": 4}).network
    >>> result = exact_outcomes(net)
    >>> result.states, result.correct
    (230, 'X')
    >>> result.probabilities
    {'X': 0.820358, 'Y': 0.179642, 'none': 0.0}
    >>> round(result.expected_time, 3)
    8.327
    """
    if method not in _METHODS:
        raise ValueError(f"`method` must be one of {', '.join(map(repr, _METHODS))}, "
                         f"got {method!r}")
    if absorb not in ("stable", "first"):
        raise ValueError(f"`absorb` must be 'stable' or 'first', got {absorb!r}")
    limit = DEFAULT_MAX_STATES if max_states is None else int(max_states)
    estimate = _limit_check(net, limit)
    space = enumerate_configurations(net, max_states=limit, progress=progress,
                                     expected=estimate)
    return solve_absorption(net, space, method=method, absorb=absorb)


def solve_absorption(net: Network, space: StateSpace, *, method: str = "auto",
                     absorb: str = "stable", timings: dict | None = None) -> ExactResult:
    """Solve the absorption problem of :func:`exact_outcomes` on an enumerated state space.

    ``timings``, when given, receives the seconds spent in each stage
    (``reach``, ``assemble``, ``order``, ``factor``, ``solve``).
    """
    clock = _Clock(timings)
    labels = list(net.labels)
    reverse = _reverse(space)
    if absorb == "first":
        stable = consensus_labels(net, space.states)
    else:
        stable = stable_consensus(net, space, reverse)
    absorbing = stable >= 0
    probabilities = {label: 0.0 for label in labels}
    common: dict[str, Any] = dict(states=space.n_states, transitions=space.n_transitions,
                                  correct=correct_label(net), absorbing=int(absorbing.sum()))
    if absorbing[0]:
        probabilities[labels[stable[0]]] = 1.0
        probabilities[NO_CONSENSUS] = 0.0
        return ExactResult(probabilities=probabilities, expected_time=0.0, time_std=0.0,
                           method="trivial", **common)
    reaching = _can_reach(reverse, absorbing)
    if not reaching[0]:
        probabilities[NO_CONSENSUS] = 1.0
        return ExactResult(probabilities=probabilities, expected_time=math.nan,
                           time_std=math.nan, method="trivial", **common)
    transient = np.flatnonzero(reaching & ~absorbing)  # contains 0 (the initial configuration)
    clock("reach")
    position = np.full(space.n_states, -1, dtype=np.int64)
    position[transient] = np.arange(transient.size)
    del reverse
    target = np.where(reaching, stable, len(labels))  # rhs column of each absorbing configuration
    system, rhs = _absorption_system(space, transient, position, target, len(labels) + 1)
    clock("assemble")
    chosen, solve = _factorise(net, space, system, transient, method, clock)
    status, messages = 0, []
    if solve is None:
        solve, info = _iterative_solver(system)
        messages.extend(info)
    dead = ~reaching
    used = np.flatnonzero(rhs.any(axis=0))  # no configuration enters a class: nothing to solve
    h_all = np.zeros_like(rhs)
    h_all[:, used] = solve(rhs[:, used]).reshape(transient.size, -1)
    h = h_all[:, : len(labels)].sum(axis=1)
    u = solve(h).ravel()
    w = solve(u).ravel()
    clock("solve")
    residual = max(_relative_residual(system, h_all, rhs), _relative_residual(system, u, h),
                   _relative_residual(system, w, u))
    if chosen == "iterative" and residual > _RESIDUAL_WARNING:
        status = 1
        messages.append(f"iterative solve reached a relative residual of {residual:.2e}")
    start = position[0]
    for k, label in enumerate(labels):
        probabilities[label] = float(np.clip(h_all[start, k], 0.0, 1.0))
    probabilities[NO_CONSENSUS] = float(np.clip(h_all[start, -1], 0.0, 1.0))
    if not dead.any():
        probabilities[NO_CONSENSUS] = 0.0
    p_absorbed = h[start]
    mean = u[start] / p_absorbed
    second = 2.0 * w[start] / p_absorbed
    std = math.sqrt(max(second - mean * mean, 0.0))
    return ExactResult(probabilities=probabilities, expected_time=float(mean), time_std=std,
                       method=chosen, residual=float(residual), status=status,
                       message="; ".join(messages), **common)


@numba.njit(cache=True)
def _system_arrays(src, dst, rates, outflow, position, target, transient, n_columns):
    """CSR arrays of ``-Q`` on the transient configurations, and the absorption rates."""
    m = transient.shape[0]
    counts = np.ones(m + 1, dtype=np.int64)  # the diagonal, then one per inner transition
    counts[0] = 0
    for e in range(src.shape[0]):
        i = position[src[e]]
        if i >= 0 and position[dst[e]] >= 0:
            counts[i + 1] += 1
    indptr = np.cumsum(counts)
    fill = indptr[:-1].copy()
    indices = np.empty(indptr[m], dtype=np.int64)
    data = np.zeros(indptr[m])
    rhs = np.zeros((m, n_columns))
    for i in range(m):
        indices[fill[i]] = i
        data[fill[i]] = outflow[transient[i]]
        fill[i] += 1
    for e in range(src.shape[0]):
        i = position[src[e]]
        if i < 0:
            continue
        data[indptr[i]] += rates[e]  # the diagonal: total rate out
        j = position[dst[e]]
        if j >= 0:
            indices[fill[i]] = j
            data[fill[i]] = -rates[e]
            fill[i] += 1
        else:
            rhs[i, target[dst[e]]] += rates[e]
    return indptr, indices, data, rhs


def _absorption_system(space: StateSpace, transient, position, target, n_columns):
    """``-Q`` on the transient configurations (CSR) and the rates into each absorbing class.

    Column k of the right-hand side is the total rate from each transient
    configuration into configurations whose ``target`` is k. One compiled pass
    over the transitions, with no temporary arrays of their size.
    """
    indptr, indices, data, rhs = _system_arrays(
        space.src, space.dst, space.rates, space.outflow, position, target, transient,
        n_columns)
    m = transient.size
    system = sp.csr_matrix((data, indices, indptr), shape=(m, m))
    system.sum_duplicates()  # several reactions with one net change: one entry
    return system, rhs


class _Clock:
    """Adds the seconds since the previous call to ``timings[stage]`` (nothing without a dict)."""

    def __init__(self, timings: dict | None):
        import time

        self._timings, self._now, self._last = timings, time.perf_counter, time.perf_counter()

    def __call__(self, stage: str) -> None:
        if self._timings is not None:
            now = self._now()
            self._timings[stage] = self._timings.get(stage, 0.0) + now - self._last
            self._last = now


def _factorise(net: Network, space: StateSpace, system, transient: np.ndarray, method: str,
               clock=None):
    """Pick the solver for ``method`` and factorise; returns (method used, solve or None)."""
    clock = clock or _Clock(None)
    chosen = method
    if chosen in ("auto", "dissection"):
        from crn.solvers.multifrontal import factorize, plan

        # every transition moves a configuration by one live reaction's net change
        live = np.abs(net.stoichiometry.toarray()[:, net.rates > 0])
        widths = live.max(axis=1, initial=0)
        layout = None
        if method == "dissection" or transient.size >= DISSECTION_MIN:
            layout = plan(system, space.states[transient], np.ceil(widths).astype(np.int64))
            clock("order")
        fits = layout is not None and (
            layout.entries <= _DISSECTION_ENTRIES_PER_ROW * transient.size
            and layout.largest_front <= _DISSECTION_FRONT_MAX)
        if layout is not None and (method == "dissection" or fits):
            try:
                solve = factorize(system, layout).solve
                clock("factor")
                return "dissection", solve
            except MemoryError as err:
                if method == "dissection":
                    raise
                warnings.warn(f"nested dissection ran out of memory ({err}); falling back to "
                              "SuperLU", stacklevel=3)
        del layout
        chosen = "direct" if transient.size <= DIRECT_LIMIT else "iterative"
    if chosen == "direct":
        try:
            # minimum degree on A^T + A: generators of protocols are nearly structurally
            # symmetric, and this ordering gives about half the fill of COLAMD on them
            factor = spla.splu(system.tocsc(), permc_spec="MMD_AT_PLUS_A")
            clock("factor")
            return chosen, factor.solve
        except (MemoryError, RuntimeError) as err:
            warnings.warn(f"sparse LU failed ({err}); falling back to an iterative solver",
                          stacklevel=3)
    return "iterative", None


def _relative_residual(system, x, b) -> float:
    r = system @ x - b
    scale = np.abs(b).max() + 1e-300
    return float(np.abs(r).max() / scale)


def _iterative_solver(system):
    info: list[str] = []
    try:
        ilu = spla.spilu(system.tocsc(), permc_spec="MMD_AT_PLUS_A", drop_tol=1e-6, fill_factor=10)
        preconditioner = spla.LinearOperator(system.shape, ilu.solve)
    except (MemoryError, RuntimeError) as err:
        info.append(f"no ILU preconditioner ({err})")
        preconditioner = None
    matrix = system.tocsr()

    def one(b):
        if not np.any(b):
            return np.zeros_like(b)
        # BiCGSTAB tends to break down on these nearly triangular systems; GMRES does not
        x, _ = spla.gmres(matrix, b, rtol=_ITERATIVE_RTOL, atol=0.0, M=preconditioner,
                          restart=30, maxiter=200)
        return x

    def solve(b):
        b = np.asarray(b, dtype=float)
        if b.ndim == 1:
            return one(b)
        return np.column_stack([one(b[:, k]) for k in range(b.shape[1])])

    return solve, info


def transient_outcomes(net: Network, until: float, *, max_states: int | None = None,
                       progress: Callable[[int, int], None] | None = None) -> dict:
    """Probability that the population is in stable consensus on each label by time ``until``.

    Finite state projection: the configurations reachable from the initial
    one are enumerated breadth-first up to ``max_states``; probability that
    flows out of the projection is lost, never returned. The projected
    solution is a lower bound on each probability of the full chain and the
    lost mass bounds the error (Munsky, Khammash 2006, Theorem 2.2); when the
    whole reachable set fits, ``lost`` is zero up to rounding and the answer
    is exact. Stable-consensus configurations are absorbing (they form closed
    sets), so being there at time T means having decided by T.

    Parameters
    ----------
    net : Network
    until : float or array_like of float, shape (n_times,)
        Deadline(s) in network time (parallel time for a protocol), >= 0.
    max_states : int, optional
        Size of the projection (default :data:`~crn.solvers.configurations.DEFAULT_MAX_STATES`).
    progress : callable, optional
        ``progress(done, total)`` during the enumeration.

    Returns
    -------
    dict
        ``{label: P(stable consensus on label by T)}`` for every label, plus
        ``"none"`` (not decided by T, within the projection) and ``"lost"``
        (mass that left the projection: an upper bound on the error of each
        value; exactly 0 when the whole reachable set fits). Floats for a scalar
        ``until``, arrays of shape (n_times,) otherwise.

    Raises
    ------
    ValueError
        When ``until`` is negative or not finite.

    References
    ----------
    Munsky, Khammash, "The finite state projection algorithm for the
    solution of the chemical master equation", J. Chem. Phys. 124:044104, 2006.
    Al-Mohy, Higham, "Computing the action of the matrix exponential",
    SIAM J. Sci. Comput. 33(2), 2011 (``scipy.sparse.linalg.expm_multiply``).
    """
    times = np.atleast_1d(np.asarray(until, dtype=float))
    if times.ndim != 1 or not np.all(np.isfinite(times)) or np.any(times < 0):
        raise ValueError(f"`until` must be finite times >= 0, got {until!r}")
    space = enumerate_configurations(net, max_states=max_states, truncate=True, progress=progress)
    stable = stable_consensus(net, space)
    # closed sets: freezing their configurations changes no occupation probability
    q = sp.diags((stable < 0).astype(float)) @ space.generator()
    forward = q.T.tocsr()
    order = np.argsort(times, kind="stable")
    p = np.zeros(space.n_states)
    p[0] = 1.0
    now = 0.0
    rows = np.empty((times.size, len(net.labels) + 2))
    for idx in order:
        step = times[idx] - now
        if step > 0:
            # expm_multiply can overshoot by rounding: probabilities stay in [0, 1]
            p = np.clip(spla.expm_multiply(forward * step, p), 0.0, 1.0)
            now = times[idx]
        for k in range(len(net.labels)):
            rows[idx, k] = p[stable == k].sum()
        kept = p.sum()
        rows[idx, -2] = min(p[stable < 0].sum(), 1.0)
        # a complete enumeration loses nothing; 1 - kept would only be rounding there
        rows[idx, -1] = 0.0 if space.complete else max(1.0 - kept, 0.0)
    keys = list(net.labels) + [NO_CONSENSUS, "lost"]
    scalar = np.ndim(until) == 0
    return {key: float(rows[0, k]) if scalar else rows[:, k].copy() for k, key in enumerate(keys)}
