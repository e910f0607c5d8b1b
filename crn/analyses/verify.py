"""Bounded verification that a protocol stably computes the majority at every small population.

For every population size n up to a bound and every split of the n agents
between the two input states, the configurations reachable from that split
are enumerated and split into strongly connected components. Under the usual
fairness assumption (every configuration reachable infinitely often is
reached) a run ends in a bottom component, so the protocol stably computes
the answer exactly when every bottom component is in consensus on the
correct label in all of its configurations.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
from scipy.sparse.csgraph import connected_components

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.core.outcome import NO_CONSENSUS, TIE, correct_label
from crn.core.protocol import Protocol
from crn.core.translate import network_to_protocol, protocol_to_network
from crn.solvers.configurations import consensus_labels, enumerate_configurations

if TYPE_CHECKING:
    from collections.abc import Callable

    import scipy.sparse as sp

    from crn.core.model import Model

__all__ = ["VerifyResult", "verify", "bottom_components"]


@dataclass(frozen=True)
class VerifyResult:
    """Outcome of :func:`verify`.

    Attributes
    ----------
    checked : int
        Number of (n, split) cases examined, ties included.
    correct : bool
        True when no examined case has a bad bottom component.
    counterexample : dict or None
        The first failure: ``{n, initial, path, label, expected, final}`` with
        ``initial`` and ``final`` counts by state name, ``path`` the shortest
        sequence of interactions from ``initial`` into a bad bottom component
        (each ``{"pair": [p, q], "outcome": [p2, q2]}``, ordered initiator and
        responder; ``{"reaction": "A + B -> C"}`` for a network that is not a
        protocol), ``label`` what that component outputs (``"none"`` when it
        is not a stable consensus) and ``expected`` the correct label.
    ties : list of dict
        Tie splits of a model without a ``tie`` label, reported instead of
        judged: ``{n, initial, outcomes}`` with ``outcomes`` the sorted labels
        of the bottom components (``"none"`` for those without stable consensus).
    max_n : int
        The largest n examined.
    largest : int
        Most configurations reachable in one case.
    """

    checked: int
    correct: bool
    counterexample: dict | None
    ties: list[dict] = field(default_factory=list)
    max_n: int = 0
    largest: int = 0


def bottom_components(adjacency: sp.csr_matrix) -> tuple[np.ndarray, np.ndarray]:
    """Strongly connected components and which of them are bottom (no edge leaves them).

    Parameters
    ----------
    adjacency : scipy.sparse matrix, shape (n_states, n_states)

    Returns
    -------
    component : ndarray of int, shape (n_states,)
        Component of each configuration.
    bottom : ndarray of bool, shape (n_components,)
    """
    n_comp, component = connected_components(adjacency, directed=True, connection="strong")
    coo = adjacency.tocoo()
    leaving = component[coo.row] != component[coo.col]
    bottom = np.ones(n_comp, dtype=bool)
    bottom[component[coo.row[leaving]]] = False
    return component, bottom


def _network_and_protocol(model_or_protocol):
    if isinstance(model_or_protocol, Protocol):
        return protocol_to_network(model_or_protocol), model_or_protocol
    if isinstance(model_or_protocol, Network):
        net = model_or_protocol
        protocol = None
    elif hasattr(model_or_protocol, "network"):
        net = model_or_protocol.network
        protocol = getattr(model_or_protocol, "protocol", None)
    else:
        raise TypeError("`model_or_protocol` must be a Model, a Protocol or a Network, "
                        f"got {type(model_or_protocol).__name__}")
    if protocol is None and all(o == 2 for o in net.orders):
        try:
            protocol, _ = network_to_protocol(net)
        except CRNError:
            protocol = None
    return net, protocol


def _step_table(net: Network, protocol: Protocol | None) -> list[dict]:
    """One interaction (or reaction) description per reaction of ``net``."""
    def multiset(*names):
        return tuple(sorted(Counter(names).items()))

    steps: list[dict] = []
    for reaction in net.reactions():
        key = (tuple(sorted(reaction.reactants.items())), tuple(sorted(reaction.products.items())))
        found: dict | None = None
        for (p, q), outcomes in (protocol.transitions.items() if protocol else ()):
            for o in outcomes:
                if o.probability > 0 and (multiset(p, q), multiset(o.initiator, o.responder)) \
                        == key:
                    found = {"pair": [p, q], "outcome": [o.initiator, o.responder]}
                    break
            if found:
                break
        steps.append(found or {"reaction": str(reaction)})
    return steps


def verify(model_or_protocol: Model | Protocol, max_n: int,
           progress: Callable[[int, int], None] | None = None, *, max_states: int | None = None,
           stop_at_first: bool = True) -> VerifyResult:
    """Check stable computation of the majority for every n in 2..max_n and every input split.

    For each n and each ``a`` in 0..n, the first input state of the question
    starts with ``a`` agents and the second with ``n - a``. Other states keep
    the counts the model gives them (usually zero), added on top of the n
    input agents, so a model with a leader keeps its leader. The case is
    correct when every bottom strongly connected component of the reachable
    configuration graph is in stable consensus on
    :func:`crn.core.outcome.correct_label`. At a tie, a model with a ``tie`` label
    must reach stable consensus on it; without one, ties are listed in
    ``ties`` and are not failures.

    Parameters
    ----------
    model_or_protocol : Model, Protocol or Network
        Must ask a majority question (``[question] majority``).
    max_n : int
        Largest number of input agents, at least 2.
    progress : callable, optional
        ``progress(done, total)`` after each n (``total = max_n - 1``).
    max_states : int, optional
        Limit on the configurations of one case (see
        :func:`crn.solvers.configurations.enumerate_configurations`).
    stop_at_first : bool, default True
        Stop after the first n that has a failing split; among that n's
        failing splits the one with the shortest path is reported.

    Returns
    -------
    VerifyResult

    Raises
    ------
    CRNError
        When the model asks no majority question or a case exceeds ``max_states``.
    ValueError
        When ``max_n < 2``.

    References
    ----------
    Angluin, Aspnes, Diamadi, Fischer, Peralta, "Computation in networks of
    passively mobile finite-state sensors", Distributed Computing 18(4), 2006
    (stable computation under fairness: bottom components of the configuration graph).

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> result = verify(load_model("models/exact_majority.toml"), 5)
    >>> result.correct, result.checked
    (True, 18)
    >>> refuted = verify(load_model("models/cancel_spread.toml"), 6)
    >>> refuted.correct, refuted.counterexample["n"]
    (False, 5)
    """
    if isinstance(max_n, bool) or int(max_n) != max_n or max_n < 2:
        raise ValueError(f"`max_n` must be a whole number >= 2, got {max_n!r}")
    max_n = int(max_n)
    net, protocol = _network_and_protocol(model_or_protocol)
    if net.inputs is None:
        raise CRNError(f"{net.name}: the model asks no majority question ([question] majority), "
                       "so there is nothing to verify")
    first, second = net.inputs
    has_tie_label = TIE in net.labels
    steps = _step_table(net, protocol)
    extras = np.array(net.initial, dtype=np.int64)
    extras[[first, second]] = 0
    checked, largest = 0, 0
    ties: list[dict] = []
    best = None
    for n in range(2, max_n + 1):
        for a in range(n + 1):
            x0 = extras.copy()
            x0[first], x0[second] = a, n - a
            case = net.with_initial(x0)
            expected = correct_label(case)
            space = enumerate_configurations(case, max_states=max_states)
            checked += 1
            largest = max(largest, space.n_states)
            component, bottom = bottom_components(space.adjacency())
            labels = consensus_labels(case, space.states)
            output = _component_labels(component, bottom.size, labels)
            names = [NO_CONSENSUS if k < 0 else net.labels[k] for k in output]
            if expected == TIE and not has_tie_label:
                outcomes = sorted({names[c] for c in np.flatnonzero(bottom)})
                ties.append({"n": n, "initial": _named(net, x0), "outcomes": outcomes})
                continue
            bad = bottom & np.array([name != expected for name in names], dtype=bool)
            if not bad.any():
                continue
            # breadth-first order: the first bad configuration is a nearest one
            target = int(np.flatnonzero(bad[component])[0])
            path = [steps[r] for r in space.path_to(target)]
            if best is None or len(path) < len(best["path"]):
                best = {"n": n, "initial": _named(net, x0), "path": path,
                        "label": names[component[target]], "expected": expected,
                        "final": _named(net, space.states[target])}
        if progress is not None:
            progress(n - 1, max_n - 1)
        if best is not None and stop_at_first:
            return VerifyResult(checked, False, best, ties, n, largest)
    return VerifyResult(checked, best is None, best, ties, max_n, largest)


def _component_labels(component, n_components, labels) -> np.ndarray:
    """Common consensus label of each component, -1 when its configurations differ or have none."""
    low = np.full(n_components, np.iinfo(np.int64).max, dtype=np.int64)
    high = np.full(n_components, np.iinfo(np.int64).min, dtype=np.int64)
    np.minimum.at(low, component, labels)
    np.maximum.at(high, component, labels)
    return np.where((low == high) & (low >= 0), low, -1)


def _named(net: Network, x) -> dict[str, int]:
    return {s: int(c) for s, c in zip(net.species, x, strict=True)}
