"""Monotone protocols: when more of the winning input can only help, proved by a coupling.

Order the states of a deterministic population protocol from "worst" to "best"
for a label L. Compare two configurations of the same n agent by agent. If
every transition keeps that comparison (for ordered input pairs
``(p, q) <= (p', q')`` the output pairs, each sorted, compare the same way),
then two runs driven by the same scheduler (the same agents interact at the
same times) stay ordered forever: this is a monotone coupling. When moreover
the states reporting L are the top of the order and every other label's
consensus is closed (no transition leaves it), a run from the lower start
that settles first on L by time H forces the run from the upper start to do
the same. Hence

    P(upper does not settle first on L by H) <= P(lower does not ...),

exactly, for every horizon H. A regime-map cell whose start dominates an
``ok`` cell's start therefore inherits its bound on the probability of
disagreeing with the mean field (when both mean-field labels are L), without
running its own 400 runs (:func:`crn.analyses.regimes.regime_map`).

The check is on the protocol the batched engine runs
(:func:`crn.engines.batched.protocol_tables`: the same count process, each
ordered pair with one outcome where the network allows), over every order of
up to :data:`MAX_STATES` states. Randomized transitions, species the
consensus ignores and more states than that give no certificate (the regime
map then samples every cell).

References
----------
Lindvall, "Lectures on the Coupling Method", Wiley 1992, ch. IV (monotone
couplings of Markov processes on ordered spaces); Angluin, Aspnes, Eisenstat,
Distributed Computing 21(2), 2008 (the three-state approximate majority
protocol, which this check certifies).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from crn.core.errors import CRNError
from crn.core.network import IGNORED, Network

__all__ = ["MAX_STATES", "MonotoneOrder", "implies", "monotone_order"]

#: Most states whose orders are searched (8! orders would take seconds).
MAX_STATES = 7


@dataclass(frozen=True)
class MonotoneOrder:
    """A certificate that a protocol is monotone towards one label.

    Attributes
    ----------
    label : str
        The label whose states are the top of the order.
    order : tuple of str
        Species from the bottom of the order to the top.
    """

    label: str
    order: tuple[str, ...]

    def dominates(self, network: Network, upper, lower) -> bool:
        """Whether counts ``upper`` dominate counts ``lower`` agent by agent in this order.

        True when both hold the same number of agents and, for every state,
        at least as many agents of ``upper`` as of ``lower`` sit at or above it
        (then the agents can be paired so that each upper agent's state is at
        least its partner's).

        Parameters
        ----------
        network : Network
            Gives the species index of the counts.
        upper, lower : array_like of int, shape (n_species,)
        """
        index = [network.index[s] for s in self.order]
        up = np.asarray(upper, dtype=np.int64)[index]
        low = np.asarray(lower, dtype=np.int64)[index]
        if up.sum() != low.sum():
            return False
        return bool(np.all(np.cumsum(up[::-1]) >= np.cumsum(low[::-1])))


def _protocol(net: Network):
    """(outcomes, time scale): an (S, S, 2) array of each ordered pair's outputs and the
    protocol's parallel time per unit of network time; None if some pair is randomized.
    """
    from crn.engines.batched import protocol_tables

    try:
        tables = protocol_tables(net)
    except CRNError:
        return None
    n = len(net.species)
    out = np.empty((n, n, 2), dtype=np.int64)
    for p in range(n):
        for q in range(n):
            pq = p * n + q
            if tables["w"][pq] <= 0.0:
                out[p, q] = (p, q)
            elif tables["det"][pq] >= 0:
                o = tables["det"][pq]
                out[p, q] = (tables["out_c"][o], tables["out_d"][o])
            else:
                return None
    return out, tables["time_scale"]


def _is_monotone(out: np.ndarray, rank: np.ndarray) -> bool:
    """Whether every ordered-pair comparison survives the transition (outputs sorted)."""
    n = rank.shape[0]
    r_out = rank[out]
    low = r_out.min(axis=2).reshape(-1)
    high = r_out.max(axis=2).reshape(-1)
    rp = np.repeat(rank, n)
    rq = np.tile(rank, n)
    below = (rp[:, None] <= rp[None, :]) & (rq[:, None] <= rq[None, :])
    ok = (low[:, None] <= low[None, :]) & (high[:, None] <= high[None, :])
    return bool(np.all(ok | ~below))


def _closed(out: np.ndarray, states: np.ndarray) -> bool:
    """Whether no pair of these states leaves them."""
    inside = np.zeros(out.shape[0], dtype=bool)
    inside[states] = True
    return all(inside[out[p, q]].all() for p in states for q in states)


def monotone_order(net: Network, label: str) -> MonotoneOrder | None:
    """An order of the states proving the protocol monotone towards ``label``, if one exists.

    Parameters
    ----------
    net : Network
        A network of two-in two-out reactions (a population protocol).
    label : str
        One of ``net.labels``.

    Returns
    -------
    MonotoneOrder or None
        None when the protocol is randomized, has ignored species or more than
        :data:`MAX_STATES` states, when ``label``'s states cannot be the top
        of a monotone order, or when another label's consensus can be left.

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> net = load_model("models/approximate_majority.toml").network
    >>> monotone_order(net, "X").order
    ('Y', 'B', 'X')
    """
    if not _searchable(net, label):
        return None
    protocol = _protocol(net)
    return None if protocol is None else _order_of(net, protocol[0], label)


def _searchable(net: Network, label: str) -> bool:
    """The checks before any table is built: a known label, few states, none ignored."""
    return (label in net.labels and len(net.species) <= MAX_STATES
            and not np.any(np.asarray(net.species_label) == IGNORED))


def _order_of(net: Network, out: np.ndarray, label: str) -> MonotoneOrder | None:
    """:func:`monotone_order` for a protocol whose outcome table is ``out``."""
    if not _searchable(net, label):
        return None
    labels = np.asarray(net.species_label)
    order = _search(out.tobytes(), len(net.species), tuple(int(k) for k in labels),
                    net.labels.index(label))
    return None if order is None else MonotoneOrder(label, tuple(net.species[s] for s in order))


@lru_cache(maxsize=256)
def _search(table: bytes, n: int, labels: tuple[int, ...], target: int) -> tuple | None:
    """Species indices from bottom to top of a monotone order with ``target``'s states on
    top, or None (cached: every cell of a regime map runs the same protocol).
    """
    out = np.frombuffer(table, dtype=np.int64).reshape(n, n, 2)
    kinds = np.array(labels)
    for other in set(labels) - {target, -1}:
        if not _closed(out, np.flatnonzero(kinds == other)):
            return None
    top = np.flatnonzero(kinds == target)
    rest = np.flatnonzero(kinds != target)
    for low_part in itertools.permutations(rest):
        for high_part in itertools.permutations(top):
            order = [int(s) for s in (*low_part, *high_part)]
            rank = np.empty(n, dtype=np.int64)
            rank[order] = np.arange(n)
            if _is_monotone(out, rank):
                return tuple(order)
    return None


def implies(decider: Network, cell: Network, label: str) -> MonotoneOrder | None:
    """The certificate under which ``decider``'s bound on missing ``label`` carries to ``cell``.

    Both networks must run the same protocol on the same clock, the protocol
    must be monotone towards ``label`` (:func:`monotone_order`) and ``cell``'s
    initial counts must dominate ``decider``'s in that order. Then, for every
    horizon H, P(``cell``'s run does not settle first on ``label`` by H) is at
    most the same probability for ``decider``.

    Parameters
    ----------
    decider, cell : Network
    label : str

    Returns
    -------
    MonotoneOrder or None
        None when any condition fails.
    """
    if decider.species != cell.species or decider.labels != cell.labels:
        return None
    if not np.array_equal(decider.species_label, cell.species_label):
        return None
    if not _searchable(cell, label):
        return None
    first, second = _protocol(decider), _protocol(cell)
    if first is None or second is None or first[1] != second[1]:
        return None
    if not np.array_equal(first[0], second[0]):
        return None
    order = _order_of(cell, second[0], label)
    if order is None or not order.dominates(cell, cell.initial, decider.initial):
        return None
    return order
