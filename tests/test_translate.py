"""Translation protocol <-> network: properties, and the exact equivalence of the two chains."""

import re
from collections import Counter
from itertools import product

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from crn.core.errors import ModelError
from crn.core.network import Network, Reaction, propensities
from crn.core.protocol import Outcome, Protocol
from crn.core.translate import network_to_protocol, protocol_to_network


@st.composite
def protocols(draw, max_states=4, max_n=6):
    """Random protocols: up to two randomized outcomes per ordered pair, total probability <= 1."""
    k = draw(st.integers(2, max_states))
    states = tuple(f"S{i}" for i in range(k))
    transitions = {}
    for pair in product(states, repeat=2):
        count = draw(st.integers(0, 2))
        if not count:
            continue
        weights = draw(st.lists(st.integers(1, 8), min_size=count, max_size=count))
        total = draw(st.sampled_from([0.25, 0.5, 0.75, 1.0]))
        outcomes = tuple(
            Outcome(draw(st.sampled_from(states)), draw(st.sampled_from(states)),
                    total * w / sum(weights))
            for w in weights
        )
        transitions[pair] = outcomes
    n = draw(st.integers(2, max_n))
    cuts = sorted(draw(st.lists(st.integers(0, n), min_size=k - 1, max_size=k - 1)))
    counts = np.diff([0, *cuts, n])
    initial = {s: int(c) for s, c in zip(states, counts, strict=True)}
    return Protocol("random", states, transitions, initial)


def configurations(k, n):
    """All vectors of k non-negative integers summing to n."""
    if k == 1:
        return [(n,)]
    return [(first, *rest) for first in range(n + 1) for rest in configurations(k - 1, n - first)]


def protocol_generator(protocol: Protocol):
    """CTMC generator of the continuous-time protocol, straight from docs/design.md's semantics:
    interactions at rate n, the ordered pair of distinct agents uniform over n(n-1), each
    outcome applied with its probability (the rest null)."""
    states = protocol.states
    n = protocol.population
    configs = configurations(len(states), n)
    index = {c: i for i, c in enumerate(configs)}
    q = np.zeros((len(configs), len(configs)))
    position = {s: i for i, s in enumerate(states)}
    for c in configs:
        for (p, r), outcomes in protocol.transitions.items():
            i, j = position[p], position[r]
            pairs = c[i] * (c[j] - (i == j))
            if pairs <= 0:
                continue
            pair_rate = n * pairs / (n * (n - 1))
            for o in outcomes:
                target = list(c)
                target[i] -= 1
                target[j] -= 1
                target[position[o.initiator]] += 1
                target[position[o.responder]] += 1
                if tuple(target) != c:
                    q[index[c], index[tuple(target)]] += pair_rate * o.probability
    q -= np.diag(q.sum(axis=1))
    return configs, q


def network_generator(net: Network, configs):
    """CTMC generator of a network over the given configurations, from its propensities."""
    index = {c: i for i, c in enumerate(configs)}
    change = net.stoichiometry.toarray().astype(np.int64)
    q = np.zeros((len(configs), len(configs)))
    for c in configs:
        a = propensities(net, np.array(c))
        for r in range(net.n_reactions):
            if a[r] == 0:
                continue
            target = tuple(np.array(c) + change[:, r])
            q[index[c], index[target]] += a[r]
    q -= np.diag(q.sum(axis=1))
    return q


def _key(reaction: Reaction):
    return tuple(sorted(reaction.reactants.items())), tuple(sorted(reaction.products.items()))


@settings(max_examples=80, deadline=None)
@given(protocols())
def test_reactions_conserve_two_agents_and_rates_add_up_to_pair_probability(protocol):
    net = protocol_to_network(protocol)
    assert net.from_protocol
    assert net.volume == max(protocol.population - 1, 1)
    for r in net.reactions():
        assert r.order == 2 and sum(r.products.values()) == 2
        assert Counter(r.reactants) != Counter(r.products)  # null reactions are dropped
    # derived (docs/design.md translation): the multiset {p, q} collects the non-null outcome
    # probability of the ordered pair (p, q) and, when p != q, of (q, p)
    expected = Counter()
    for (p, q), outcomes in protocol.transitions.items():
        for o in outcomes:
            if sorted((o.initiator, o.responder)) != sorted((p, q)):
                expected[tuple(sorted((p, q)))] += o.probability
    got = Counter()
    for r in net.reactions():
        got[tuple(sorted(name for name, m in r.reactants.items() for _ in range(m)))] += r.rate
    assert set(got) == {pair for pair, total in expected.items() if total > 0}
    for pair, total in expected.items():
        assert got[pair] == pytest.approx(total, rel=1e-12, abs=1e-15)


@settings(max_examples=60, deadline=None)
@given(protocols())
def test_network_chain_equals_protocol_chain_entry_by_entry(protocol):
    # docs/design.md: with volume n - 1 the network's CTMC is exactly the continuous-time protocol
    configs, q_protocol = protocol_generator(protocol)
    net = protocol_to_network(protocol)
    assert net.volume == protocol.population - 1
    q_network = network_generator(net, configs)
    np.testing.assert_allclose(q_network, q_protocol, rtol=1e-12, atol=1e-12)


@settings(max_examples=60, deadline=None)
@given(protocols())
def test_back_translation_gives_the_same_chain(protocol):
    net = protocol_to_network(protocol)
    back, scale = network_to_protocol(net)
    again = protocol_to_network(back)
    original = {_key(r): r.rate for r in net.reactions()}
    recovered = {_key(r): r.rate * scale for r in again.reactions()}
    assert set(recovered) == set(original)
    for key, rate in original.items():
        assert recovered[key] == pytest.approx(rate, rel=1e-12)
    # derived: one unit of network time is `scale` units of the back protocol's parallel
    # time, so the network's generator is `scale` times the back protocol's
    configs, q_back = protocol_generator(back)
    np.testing.assert_allclose(network_generator(net, configs), scale * q_back, rtol=1e-12,
                               atol=1e-12)


def test_network_to_protocol_on_a_plain_network_with_other_volume():
    # A + B -> 2 A at rate k, volume v, n molecules: the protocol runs ordered pairs at
    # rate n; derived: per unit network time the reaction fires k a b / v times, the
    # protocol (A, B) and (B, A) pairs together 2 * pi * a b / (n - 1) * scale times.
    net = Network.from_reactions("n", ["A", "B"], [Reaction({"A": 1, "B": 1}, {"A": 2}, 3.0)],
                                 volume=2.0, initial={"A": 3, "B": 2})
    back, scale = network_to_protocol(net)
    configs, q_back = protocol_generator(back)
    np.testing.assert_allclose(network_generator(net, configs), scale * q_back, rtol=1e-12)


@pytest.mark.parametrize("reaction", [
    Reaction({"A": 1}, {}, 1.0),
    Reaction({"A": 1, "B": 1}, {"A": 3}, 1.0),
    Reaction({}, {"A": 1, "B": 1}, 1.0),
])
def test_network_to_protocol_refuses_other_reactions_naming_them(reaction):
    net = Network.from_reactions("n", ["A", "B"], [Reaction({"A": 1, "B": 1}, {"B": 2}, 1.0),
                                                   reaction], initial={"A": 2, "B": 2})
    with pytest.raises(ModelError, match=re.escape(f"reaction 2 ({reaction})")):
        network_to_protocol(net)


def test_propensity_convention_of_condon_et_al():
    # Condon, Hajiaghayi, Kirkpatrick, Manuch, Natural Computing 2020: propensity
    # k * prod x!/(x - s)! / v^(order - 1): A + B gives k a b / v, 2 A gives k a (a - 1) / v
    # (no division by 2), 3 A gives k a (a - 1)(a - 2) / v^2; 0 -> A gives k v.
    k, v = 0.7, 12.5
    net = Network.from_reactions("c", ["A", "B", "C"], [
        Reaction({"A": 1, "B": 1}, {"C": 1}, k),
        Reaction({"A": 2}, {"B": 1}, k),
        Reaction({"A": 3}, {"C": 1}, k),
        Reaction({}, {"A": 1}, k),
        Reaction({"B": 1}, {}, k),
    ], volume=v)
    for a, b in [(0, 0), (1, 5), (2, 3), (7, 11), (40, 1)]:
        got = propensities(net, [a, b, 0])
        want = [k * a * b / v, k * a * (a - 1) / v, k * a * (a - 1) * (a - 2) / v**2, k * v,
                k * b]
        np.testing.assert_allclose(got, want, rtol=1e-14)


def test_epidemic_both_orders_merge_into_one_reaction_of_rate_two():
    # derived: with both orders infecting, the mean field is
    # dy/dt = 2 y (1 - y), i.e. one reaction I + S -> 2 I of rate 2 (the two ordered pairs)
    p = Protocol("e", ("I", "S"), {("I", "S"): (Outcome("I", "I"),),
                                   ("S", "I"): (Outcome("I", "I"),)}, {"I": 1, "S": 9})
    (reaction,) = protocol_to_network(p).reactions()
    assert (dict(reaction.reactants), dict(reaction.products), reaction.rate) == (
        {"I": 1, "S": 1}, {"I": 2}, 2.0)
