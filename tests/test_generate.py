"""Protocols built from a rule function by breadth-first closure."""

from dataclasses import dataclass

import pytest

from crn.core.errors import ModelError
from crn.core.generate import protocol_from_rule, state_name
from crn.core.protocol import Outcome


@dataclass(frozen=True)
class Counter:
    value: int


def test_closure_finds_exactly_the_reachable_states():
    # A counter that two equal agents push up by one, capped at 5: from value 0 the
    # closure must reach 0..5 and nothing else (derived: each rule adds one).
    def rule(a, b):
        if a == b and a.value < 5:
            return Counter(a.value + 1), b
        return None

    p = protocol_from_rule("counter", rule, {Counter(0): 10})
    assert p.states == tuple(f"s_{k}" for k in range(6))
    assert p.transitions[("s_2", "s_2")] == (Outcome("s_3", "s_2"),)
    assert ("s_5", "s_5") not in p.transitions


def test_randomized_outcomes_and_labels():
    def rule(a, b):
        if (a, b) == ("U", "U"):
            return [(0.5, ("X", "U")), (0.5, ("Y", "U"))]
        return None

    p = protocol_from_rule("coin", rule, {"U": 4}, output=lambda s: s if s != "U" else None)
    assert p.outcomes("U", "U") == (Outcome("X", "U", 0.5), Outcome("Y", "U", 0.5))
    assert p.output == {"X": "X", "Y": "Y"}


def test_the_state_cap_stops_an_unbounded_closure():
    def rule(a, b):
        return (a[0] + 1,), b

    with pytest.raises(ModelError, match="exceeds 50 states"):
        protocol_from_rule("runaway", rule, {(0,): 2}, max_states=50)


def test_state_names_are_identifiers():
    assert state_name(("strong", 1)) == "strong_1"
    assert state_name(Counter(-2)) == "m2"
    assert state_name(Counter(3)) == "s_3"
    assert state_name("X") == "X"


def test_malformed_rule_result_is_reported():
    with pytest.raises(ModelError, match="must return"):
        protocol_from_rule("bad", lambda a, b: ["nonsense"], {"A": 2})
