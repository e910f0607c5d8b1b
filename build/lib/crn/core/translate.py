"""Translation between population protocols and bimolecular reaction networks.

Protocol -> network: each outcome (p', q') of the ordered pair (p, q) with
probability pi becomes ``p + q -> p' + q'`` at rate pi; reactions with equal
reactant and product multisets are merged by adding rates; null reactions are
dropped; the volume is n - 1. The network's continuous-time Markov chain is
then exactly the continuous-time protocol (interactions at rate n), and
network time equals parallel time.
"""

from __future__ import annotations

from collections import Counter

from crn.core.errors import ModelError
from crn.core.network import Network, Reaction
from crn.core.protocol import Outcome, Protocol

__all__ = ["protocol_to_network", "network_to_protocol"]


def _multiset(*names: str) -> tuple[tuple[str, int], ...]:
    return tuple(sorted(Counter(names).items()))


def protocol_to_network(protocol: Protocol) -> Network:
    """Translate a population protocol into its mass-action reaction network.

    Parameters
    ----------
    protocol : Protocol

    Returns
    -------
    Network
        Species in the protocol's state order, one reaction per distinct
        (reactants, products) pair of multisets, volume ``n - 1`` (at least 1)
        for ``n`` agents, ``from_protocol=True``.

    Examples
    --------
    >>> from crn.core.protocol import Protocol, Outcome
    >>> p = Protocol("epidemic", ("I", "S"), {("I", "S"): (Outcome("I", "I"),)}, {"I": 1, "S": 9})
    >>> [str(r) for r in protocol_to_network(p).reactions()]
    ['I + S -> 2 I']
    """
    merged: dict[tuple, float] = {}
    for (p, q), outcomes in protocol.transitions.items():
        before = _multiset(p, q)
        for outcome in outcomes:
            after = _multiset(outcome.initiator, outcome.responder)
            if after == before or outcome.probability <= 0:
                continue
            merged[(before, after)] = merged.get((before, after), 0.0) + outcome.probability
    reactions = [Reaction(dict(b), dict(a), rate) for (b, a), rate in merged.items()]
    n = protocol.population
    return Network.from_reactions(
        protocol.name,
        protocol.states,
        reactions,
        volume=max(n - 1, 1),
        initial=protocol.initial,
        output=protocol.output,
        majority=protocol.majority,
        from_protocol=True,
        about=protocol.about,
    )


def network_to_protocol(net: Network, bound: float | None = None) -> tuple[Protocol, float]:
    """Run a network whose reactions are all two-in two-out as a population protocol.

    A reaction ``A + B -> C + D`` of rate k at volume v behaves, among n
    molecules, like ordered-pair interactions at total rate ``k' = k (n-1) / v``.
    For ``A != B`` the rate is split evenly over the orders (A, B) and (B, A);
    each becomes a randomized transition of probability ``k' / (2 R)`` (``k' / R``
    for ``A + A``), where R bounds the total of any ordered pair. The protocol
    then runs R times slower: network time = parallel time / R.

    Parameters
    ----------
    net : Network
    bound : float, optional
        The bound R; by default the smallest valid one.

    Returns
    -------
    protocol : Protocol
    time_scale : float
        R: one unit of network time is R units of the protocol's parallel time.

    Raises
    ------
    ModelError
        Naming the first reaction that does not have exactly two reactant and
        two product molecules, or if ``bound`` is too small.
    """
    n = net.population
    scale = (max(n - 1, 1)) / net.volume
    per_pair: dict[tuple[str, str], list[tuple[str, str, float]]] = {}
    for i, reaction in enumerate(net.reactions()):
        produced = sum(reaction.products.values())
        if reaction.order != 2 or produced != 2:
            raise ModelError(
                f"reaction {i + 1} ({reaction}) has {reaction.order} reactant and {produced} "
                "product molecules; only two-in two-out reactions can run as a protocol",
                field=f"reactions[{i}]",
            )
        a, b = _expand(reaction.reactants)
        c, d = _expand(reaction.products)
        k = reaction.rate * scale
        if a == b:
            per_pair.setdefault((a, a), []).append((c, d, k))
        else:
            per_pair.setdefault((a, b), []).append((c, d, k / 2))
            per_pair.setdefault((b, a), []).append((d, c, k / 2))
    needed = max((sum(k for *_, k in outs) for outs in per_pair.values()), default=1.0)
    if bound is None:
        bound = needed if needed > 0 else 1.0
    elif bound < needed * (1 - 1e-12):
        raise ModelError(f"bound {bound} is below the largest total pair rate {needed}")
    transitions = {
        pair: tuple(Outcome(c, d, k / bound) for c, d, k in outs) for pair, outs in per_pair.items()
    }
    protocol = Protocol(
        net.name,
        net.species,
        transitions,
        {s: int(c) for s, c in zip(net.species, net.initial, strict=True) if c},
        net.output,
        net.majority,
        net.about,
    )
    return protocol, float(bound)


def _expand(side) -> list[str]:
    return [name for name, m in side.items() for _ in range(m)]
