"""Configurations of a network: counting them ahead of time and enumerating the reachable ones.

The enumeration is a breadth-first search in compiled code over count vectors,
with an open-addressing hash table keyed by the whole vector, so it works for
any number of species and any conservation law. The breadth-first order gives
shortest paths for free (every configuration keeps its parent), and the
transition list it returns carries the propensities of
:func:`crn.core.network.propensities`, so the chain it describes is the network's
continuous-time Markov chain on the network's own clock.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from typing import TYPE_CHECKING

import numba
import numpy as np
import scipy.sparse as sp

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.core.outcome import consensus_index

if TYPE_CHECKING:
    from collections.abc import Callable

__all__ = [
    "DEFAULT_MAX_STATES",
    "StateSpace",
    "conservation_weights",
    "estimate_configurations",
    "estimate_memory",
    "enumerate_configurations",
    "factor_entries_per_row",
    "lattice_dimension",
    "consensus_labels",
]

#: Default limit on the number of configurations: about 2-5 GiB of graph and
#: factor on a 24 GiB machine for protocols with a handful of states.
DEFAULT_MAX_STATES = 10_000_000

_CHUNK = 1 << 16  # configurations expanded per compiled call, between progress reports
_KNAPSACK_LIMIT = 10_000_000  # largest conserved total counted exactly by dynamic programming


@dataclass(frozen=True)
class StateSpace:
    """Configurations reachable from a network's initial counts, in breadth-first order.

    Attributes
    ----------
    states : ndarray of int64, shape (n_states, n_species)
        Counts of each configuration; row 0 is the initial configuration.
    src, dst : ndarray of int64, shape (n_transitions,)
        Transitions between configurations (``src != dst``); a pair may appear
        more than once when several reactions have the same net change.
    rates : ndarray of float64, shape (n_transitions,)
        Propensity of each transition (:func:`crn.core.network.propensities`).
    outflow : ndarray of float64, shape (n_states,)
        Total propensity of transitions leaving the enumerated set (zero unless
        the enumeration was truncated).
    parent : ndarray of int64, shape (n_states,)
        Configuration from which each one was first reached (-1 for the initial one).
    parent_reaction : ndarray of int64, shape (n_states,)
        Reaction that first reached it (-1 for the initial one).
    complete : bool
        False when the enumeration stopped at the limit (a finite state projection).
    """

    states: np.ndarray
    src: np.ndarray
    dst: np.ndarray
    rates: np.ndarray
    outflow: np.ndarray
    parent: np.ndarray
    parent_reaction: np.ndarray
    complete: bool

    @property
    def n_states(self) -> int:
        """Number of configurations."""
        return int(self.states.shape[0])

    @property
    def n_transitions(self) -> int:
        """Number of transitions between configurations."""
        return int(self.src.shape[0])

    def generator(self) -> sp.csr_matrix:
        """Generator matrix Q (rows sum to zero, or to minus the outflow when truncated).

        Returns
        -------
        scipy.sparse.csr_matrix, shape (n_states, n_states)
            ``Q[i, j]`` is the rate from configuration i to j; the diagonal is
            minus the total rate out of i (including the outflow).
        """
        n = self.n_states
        out = np.bincount(self.src, weights=self.rates, minlength=n) + self.outflow
        rows = np.concatenate([self.src, np.arange(n)])
        cols = np.concatenate([self.dst, np.arange(n)])
        vals = np.concatenate([self.rates, -out])
        return sp.csr_matrix((vals, (rows, cols)), shape=(n, n))

    def adjacency(self) -> sp.csr_matrix:
        """Boolean transition graph, shape (n_states, n_states)."""
        n = self.n_states
        data = np.ones(self.n_transitions, dtype=np.int8)
        graph = sp.csr_matrix((data, (self.src, self.dst)), shape=(n, n))
        graph.data[:] = 1
        return graph

    def path_to(self, index: int) -> list[int]:
        """Reactions along a shortest path from the initial configuration to ``index``."""
        steps = []
        while index > 0:
            steps.append(int(self.parent_reaction[index]))
            index = int(self.parent[index])
        return steps[::-1]


def conservation_weights(net: Network) -> tuple[np.ndarray, np.ndarray] | None:
    """A positive integer conservation law covering every species that changes.

    Parameters
    ----------
    net : Network

    Returns
    -------
    (weights, changing) or None
        ``weights`` (int64, one per changing species) with ``weights @ x``
        constant along every run, and ``changing`` the indices of the species
        some reaction (of positive rate) changes; None when no such law exists
        (the reachable set may then be infinite).
    """
    live = np.flatnonzero(net.rates > 0)
    stoich = net.stoichiometry.toarray()[:, live]
    changing = np.flatnonzero(np.abs(stoich).sum(axis=1) > 0)
    if changing.size == 0:
        return np.zeros(0, dtype=np.int64), changing
    block = stoich[changing]
    if not np.any(block.sum(axis=0)):
        return np.ones(changing.size, dtype=np.int64), changing
    from scipy.optimize import linprog

    solution = linprog(np.ones(changing.size), A_eq=block.T, b_eq=np.zeros(block.shape[1]),
                       bounds=[(1, None)] * changing.size, method="highs")
    if solution.status != 0:
        return None
    fractions = [Fraction(float(w)).limit_denominator(1000) for w in solution.x]
    scale = math.lcm(*(f.denominator for f in fractions))
    weights = np.array([int(f * scale) for f in fractions], dtype=np.int64)
    if np.any(weights @ block):
        return None
    return weights, changing


def estimate_configurations(net: Network) -> int:
    """Upper bound on the number of configurations reachable from the initial counts.

    For a protocol (every reaction keeps the number of agents) the bound is the
    number of compositions of n into the S states that change,
    ``C(n + S - 1, S - 1)``. For a network with a positive integer
    conservation law ``w @ x = c`` it is the number of non-negative integer
    solutions of that equation. Species no reaction changes are fixed.

    Parameters
    ----------
    net : Network

    Returns
    -------
    int

    Raises
    ------
    CRNError
        When no positive conservation law bounds the species that change (the
        reachable set may be infinite; use a finite state projection instead).
    """
    found = conservation_weights(net)
    if found is None:
        raise CRNError(
            f"{net.name}: no conservation law bounds the counts, so the reachable configurations "
            "may be infinitely many; exact analysis needs a finite state space "
            "(a finite state projection can still give transient probabilities)"
        )
    weights, changing = found
    if changing.size == 0:
        return 1
    total = int(weights @ net.initial[changing])
    if np.all(weights == 1):
        bound = math.comb(total + changing.size - 1, changing.size - 1)
    elif total <= _KNAPSACK_LIMIT:
        bound = _knapsack_bound(weights, total)
    else:
        bound = math.prod(total // int(w) + 1 for w in weights)
    return int(min(bound, _free_coordinate_bound(net, changing)))


def _knapsack_bound(weights: np.ndarray, total: int) -> int:
    """Upper bound on the non-negative integer solutions of ``weights @ x = total``.

    The count by dynamic programming (``ways[c] += ways[c - w]`` for each weight,
    done as prefix sums over each residue class), in floating point: each
    count passes through fewer than ``len(weights) * (total + 1)`` additions of
    relative rounding error ``2**-53`` each, so the result raised by one part in
    a million and rounded up bounds the exact count. Past the floating-point
    range, ``C(total + S, S)`` (every solution has ``sum(x) <= total``) is used.
    """
    ways = np.zeros(total + 1)
    ways[0] = 1.0
    with np.errstate(over="ignore"):
        for w in (int(v) for v in weights):
            for r in range(min(w, total + 1)):
                ways[r::w] = np.cumsum(ways[r::w])
    last = float(ways[total])
    if not math.isfinite(last):
        return math.comb(total + weights.size, weights.size)
    return int(math.ceil(last * (1.0 + 1e-6)))


def _free_coordinate_bound(net: Network, changing: np.ndarray) -> float:
    """Product of the count ranges of species that fix all others through the conservation laws.

    Every reachable x lies in ``x0 + span(stoichiometry)`` with ``x >= 0``;
    a set F of species whose rows of a basis of that span have full rank
    determines x from ``x_F``. Each ``x_s`` is at most the largest value the
    linear relaxation allows (a linear program); the product of those ranges
    over the F of least product (chosen greedily, a matroid) bounds the count.
    """
    from scipy.linalg import null_space, orth
    from scipy.optimize import linprog

    live = np.flatnonzero(net.rates > 0)
    stoich = net.stoichiometry.toarray()[np.ix_(changing, live)]
    span = orth(stoich)
    laws = null_space(stoich.T).T
    x0 = net.initial[changing].astype(float)
    upper = np.empty(changing.size)
    for k in range(changing.size):
        goal = np.zeros(changing.size)
        goal[k] = -1.0
        if laws.shape[0]:
            res = linprog(goal, A_eq=laws, b_eq=laws @ x0, bounds=[(0, None)] * changing.size,
                          method="highs")
        else:
            res = linprog(goal, bounds=[(0, None)] * changing.size, method="highs")
        if res.status != 0:
            return math.inf
        upper[k] = -res.fun
    chosen: list[int] = []
    for k in np.argsort(upper, kind="stable"):
        trial = chosen + [int(k)]
        if np.linalg.matrix_rank(span[trial], tol=1e-9) == len(trial):
            chosen = trial
        if len(chosen) == span.shape[1]:
            break
    return math.prod(int(math.floor(upper[k] + 1e-9)) + 1 for k in chosen)


def lattice_dimension(net: Network) -> int:
    """Dimension of the configurations' lattice: the rank of the live reactions' changes."""
    live = net.rates > 0
    if not np.any(live):
        return 0
    return int(np.linalg.matrix_rank(net.stoichiometry.toarray()[:, live]))


def factor_entries_per_row(net: Network, n_states: int) -> float:
    """Entries per configuration of the LU factors of the absorption system (an estimate).

    Nested dissection (:mod:`crn.solvers.multifrontal`) leaves O(log N) entries
    per row on a two-dimensional lattice: measured 100, 115 and 124 at N = 0.5,
    2 and 4.5 million configurations (approximate majority, n = 1000, 2000,
    3000), about 5.6 log2 N; on a one-dimensional lattice the fronts stay of
    the size of the smallest region (a few tens). Higher dimensions fill more
    (O(N^(1/3)) per row in three); beyond 400 per row the exact solver hands
    over to SuperLU, so that is the estimate there.
    """
    dimension = lattice_dimension(net)
    if dimension <= 1:
        return 50.0
    if dimension == 2:
        return 6.0 * math.log2(max(n_states, 2))
    return 400.0


def estimate_memory(net: Network, n_states: int) -> int:
    """Rough peak memory in bytes of enumerating and solving ``n_states`` configurations.

    Counts what is alive at the peak, during the factorisation: the state space
    (counts, parent links, outflow and one transition per live reaction and
    configuration: source, target, rate), the absorption system in three sparse
    copies (as built, and reordered by rows and by columns), the right-hand
    sides and the ordering's integer arrays, and the LU factors
    (:func:`factor_entries_per_row`) with 10 % more for the dense fronts and
    the stack of updates. Measured peak resident memory of ``crn exact`` on
    approximate majority at n = 3000 (4.5 million configurations): 6.7 GiB,
    against 6.5 GiB estimated here.
    """
    live = max(int((net.rates > 0).sum()), 1)
    space = 8 * net.n_species + 24 + 24 * live
    system = 3 * 12 * (live + 1) + 8 * (len(net.labels) + 1) + 6 * 8
    factor = 8 * 1.1 * factor_entries_per_row(net, n_states)
    return int(n_states * (space + system + factor))


# -- enumeration ---------------------------------------------------------------------------------

@numba.njit(cache=True)
def _hash_row(states, i):
    h = np.uint64(0xCBF29CE484222325)
    for s in range(states.shape[1]):
        h = (h ^ np.uint64(states[i, s])) * np.uint64(0x100000001B3)
    h ^= h >> np.uint64(33)
    h *= np.uint64(0xFF51AFD7ED558CCD)
    h ^= h >> np.uint64(33)
    return h


@numba.njit(cache=True)
def _find_or_insert(states, count, table):
    """Look up row ``count`` (the candidate); insert it if new. Returns (index, inserted)."""
    mask = np.uint64(table.shape[0] - 1)
    slot = _hash_row(states, count) & mask
    n_species = states.shape[1]
    while True:
        stored = table[slot]
        if stored == 0:
            table[slot] = count + 1
            return count, True
        j = stored - 1
        same = True
        for s in range(n_species):
            if states[j, s] != states[count, s]:
                same = False
                break
        if same:
            return j, False
        slot = (slot + np.uint64(1)) & mask


@numba.njit(cache=True, nogil=True)  # nogil: Ctrl-C is seen meanwhile
def _rehash(states, count, size):
    table = np.zeros(size, dtype=np.int64)
    mask = np.uint64(size - 1)
    for i in range(count):
        slot = _hash_row(states, i) & mask
        while table[slot] != 0:
            slot = (slot + np.uint64(1)) & mask
        table[slot] = i + 1
    return table


@numba.njit(cache=True, nogil=True)  # nogil: Ctrl-C is seen meanwhile
def _expand(states, count, head, stop, table, parent, parent_reaction, outflow,
            reactant_species, reactant_counts, change, rates, volume_power,
            src, dst, edge_rates, n_edges, limit, truncate):
    """Expand configurations head..stop-1; returns (count, n_edges, status).

    status 0: fine, 1: some transitions left the set (truncated), 2: the limit was hit.
    """
    n_species = states.shape[1]
    n_reactions = rates.shape[0]
    status = 0
    for i in range(head, stop):
        for r in range(n_reactions):
            if rates[r] <= 0.0:
                continue
            factor = 1.0
            for col in range(reactant_species.shape[1]):
                s = reactant_species[r, col]
                if s < 0:
                    continue
                x = states[i, s]
                m = reactant_counts[r, col]
                if x < m:
                    factor = 0.0
                    break
                term = 1.0
                for j in range(m):
                    term *= x - j
                factor *= term
            if factor <= 0.0:
                continue
            moved = False
            for s in range(n_species):
                states[count, s] = states[i, s] + change[r, s]
                if change[r, s] != 0:
                    moved = True
            if not moved:
                continue
            a = rates[r] * factor / volume_power[r]
            if count >= limit:
                # the candidate may still be known; only a new configuration is refused
                mask = np.uint64(table.shape[0] - 1)
                slot = _hash_row(states, count) & mask
                j = -1
                while table[slot] != 0:
                    k = table[slot] - 1
                    same = True
                    for s in range(n_species):
                        if states[k, s] != states[count, s]:
                            same = False
                            break
                    if same:
                        j = k
                        break
                    slot = (slot + np.uint64(1)) & mask
                if j < 0:
                    if not truncate:
                        return count, n_edges, 2
                    outflow[i] += a
                    status = 1
                    continue
            else:
                j, inserted = _find_or_insert(states, count, table)
                if inserted:
                    parent[count] = i
                    parent_reaction[count] = r
                    count += 1
            src[n_edges] = i
            dst[n_edges] = j
            edge_rates[n_edges] = a
            n_edges += 1
    return count, n_edges, status


def _grow(array, size):
    """``array`` with room for ``size`` rows; the new rows are never read before written.

    ``np.zeros`` maps untouched pages lazily, so room that is never used costs
    no resident memory (and the result can be returned as a view).
    """
    if array.shape[0] >= size:
        return array
    out = np.zeros((size,) + array.shape[1:], dtype=array.dtype)
    out[: array.shape[0]] = array
    return out


def enumerate_configurations(net: Network, *, max_states: int | None = None,
                             truncate: bool = False,
                             progress: Callable[[int, int], None] | None = None,
                             expected: int | None = None) -> StateSpace:
    """Breadth-first enumeration of the configurations reachable from ``net.initial``.

    Parameters
    ----------
    net : Network
    max_states : int, optional
        Most configurations to keep (default :data:`DEFAULT_MAX_STATES`).
    truncate : bool, default False
        At the limit, keep the configurations found so far and record the
        propensity of the transitions that leave them (a finite state
        projection) instead of raising.
    progress : callable, optional
        Called as ``progress(expanded, found)`` between batches.
    expected : int, optional
        Room to reserve up front (e.g. :func:`estimate_configurations`), so the
        arrays need not grow; more is taken when more are found.

    Returns
    -------
    StateSpace

    Raises
    ------
    CRNError
        When more than ``max_states`` configurations are reachable and
        ``truncate`` is False.
    """
    limit = DEFAULT_MAX_STATES if max_states is None else int(max_states)
    if limit < 1:
        raise ValueError(f"`max_states` must be at least 1, got {max_states}")
    n_species, n_reactions = net.n_species, net.n_reactions
    change = np.ascontiguousarray(net.stoichiometry.toarray().T.round().astype(np.int64))
    if change.size == 0:
        change = np.zeros((n_reactions, n_species), dtype=np.int64)
    rates = np.ascontiguousarray(net.rates, dtype=np.float64)
    volume_power = np.asarray(net.volume ** (net.orders - 1.0), dtype=np.float64)
    rs = np.ascontiguousarray(net.reactant_species)
    rc = np.ascontiguousarray(net.reactant_counts)
    live = int((rates > 0).sum())

    capacity = min(limit, max(1 << 12, int(expected or 0))) + 1
    states = np.zeros((capacity, n_species), dtype=np.int64)
    states[0] = net.initial
    parent = np.zeros(capacity, dtype=np.int64)
    parent_reaction = np.zeros(capacity, dtype=np.int64)
    parent[0] = parent_reaction[0] = -1
    outflow = np.zeros(capacity, dtype=np.float64)
    table = _rehash(states, 1, 1 << 13)
    edge_cap = max(capacity * max(live, 1), 16)
    src = np.zeros(edge_cap, dtype=np.int64)
    dst = np.zeros(edge_cap, dtype=np.int64)
    edge_rates = np.zeros(edge_cap, dtype=np.float64)
    count, head, n_edges, complete = 1, 0, 0, True
    while head < count:
        stop = min(count, head + _CHUNK)
        need = min(count + (stop - head) * live, limit) + 1
        if need > states.shape[0]:
            size = min(max(need, 2 * states.shape[0]), limit + 1)
            states = _grow(states, size)
            parent = _grow(parent, size)
            parent_reaction = _grow(parent_reaction, size)
            outflow = _grow(outflow, size)
        if 2 * need > table.shape[0]:
            size = 1 << int(math.ceil(math.log2(2 * need)))
            table = _rehash(states, count, max(size, 2 * table.shape[0]))
        need_edges = n_edges + (stop - head) * live
        if need_edges > src.shape[0]:
            size = max(need_edges, 2 * src.shape[0])
            src, dst, edge_rates = _grow(src, size), _grow(dst, size), _grow(edge_rates, size)
        count, n_edges, status = _expand(
            states, count, head, stop, table, parent, parent_reaction, outflow, rs, rc, change,
            rates, volume_power, src, dst, edge_rates, n_edges, limit, truncate)
        if status == 2:
            raise CRNError(
                f"{net.name}: more than {limit:,} configurations are reachable "
                f"(estimated at most {_safe_estimate(net)}); raise max_states (--max-states) "
                "if memory allows"
            )
        if status == 1:
            complete = False
        head = stop
        if progress is not None:
            progress(head, count)
    # views, not copies: the unused tails were never touched, so they hold no memory
    return StateSpace(
        states=states[:count],
        src=src[:n_edges],
        dst=dst[:n_edges],
        rates=edge_rates[:n_edges],
        outflow=outflow[:count],
        parent=parent[:count],
        parent_reaction=parent_reaction[:count],
        complete=complete,
    )


def _safe_estimate(net: Network) -> str:
    try:
        return f"{estimate_configurations(net):,}"
    except CRNError:
        return "unbounded"


@numba.njit(cache=True)
def _labels(species_label, states):
    out = np.empty(states.shape[0], dtype=np.int64)
    for i in range(states.shape[0]):
        out[i] = consensus_index(species_label, states[i])
    return out


def consensus_labels(net: Network, states: np.ndarray) -> np.ndarray:
    """Consensus label index of each configuration (:func:`crn.core.outcome.consensus_index`).

    Parameters
    ----------
    net : Network
    states : ndarray of int64, shape (n_states, n_species)

    Returns
    -------
    ndarray of int64, shape (n_states,)
        Index into ``net.labels``, or -1 where the agents do not all report one label.
    """
    return _labels(np.ascontiguousarray(net.species_label), np.ascontiguousarray(states))
