"""Population protocols: states, ordered-pair transitions, inputs and outputs."""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, field

from crn.core.errors import ModelError

__all__ = ["Outcome", "Protocol", "is_identifier", "PROBABILITY_SLACK"]

_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
#: Rounding allowance when checking that a pair's outcome probabilities sum to at most 1.
PROBABILITY_SLACK = 1e-12


def is_identifier(name: object) -> bool:
    """Return whether ``name`` is a valid state or species name (also a valid SBML id).

    Parameters
    ----------
    name : object
        Anything; only a string can be an identifier.

    Returns
    -------
    bool
    """
    return isinstance(name, str) and bool(_IDENTIFIER.match(name))


@dataclass(frozen=True)
class Outcome:
    """One outcome of an interaction: the new initiator and responder states."""

    initiator: str
    responder: str
    probability: float = 1.0


@dataclass(frozen=True)
class Protocol:
    """A population protocol over named states.

    Parameters
    ----------
    name : str
        Human-readable name.
    states : tuple of str
        All states, in a fixed order (the species order of the translated network).
    transitions : mapping of (str, str) to tuple of Outcome
        Outcomes of each ordered (initiator, responder) pair; probabilities of
        one pair sum to at most 1, the remainder is a null interaction. Pairs
        not listed are null.
    initial : mapping of str to int
        Initial count of each state (missing states start at 0).
    output : mapping of str to str
        Label reported by each state; unlisted states report nothing.
    majority : tuple of (str, str), optional
        The two input states whose initial counts the population compares.
    about : str
        Where the protocol is published.
    """

    name: str
    states: tuple[str, ...]
    transitions: Mapping[tuple[str, str], tuple[Outcome, ...]]
    initial: Mapping[str, int] = field(default_factory=dict)
    output: Mapping[str, str] = field(default_factory=dict)
    majority: tuple[str, str] | None = None
    about: str = ""

    def __post_init__(self):
        known = set(self.states)
        if len(known) != len(self.states):
            raise ModelError("states are listed twice", field="states")
        for state in self.states:
            if not is_identifier(state):
                raise ModelError(
                    f"state name {state!r} is not an identifier "
                    "(letters, digits, _, not starting with a digit)",
                    field="states",
                )
        for (p, q), outcomes in self.transitions.items():
            if p not in known or q not in known:
                raise ModelError(f"transition of unknown pair ({p}, {q})", field="transitions")
            total = 0.0
            for outcome in outcomes:
                if outcome.initiator not in known or outcome.responder not in known:
                    raise ModelError(
                        f"outcome ({outcome.initiator}, {outcome.responder}) of ({p}, {q}) "
                        "names an unknown state",
                        field="transitions",
                    )
                if not 0.0 <= outcome.probability <= 1.0:
                    raise ModelError(
                        f"probability {outcome.probability} of ({p}, {q}) is not in [0, 1]",
                        field="transitions",
                    )
                total += outcome.probability
            if total > 1.0 + PROBABILITY_SLACK:
                raise ModelError(
                    f"outcome probabilities of ({p}, {q}) add up to {total:g} > 1",
                    field="transitions",
                )
        for state, count in self.initial.items():
            if state not in known:
                raise ModelError(f"initial count for unknown state {state!r}", field="initial")
            if isinstance(count, bool) or not isinstance(count, int) or count < 0:
                raise ModelError(
                    f"initial count of {state} must be a non-negative whole number, got {count!r}",
                    field="initial",
                )
        for state in self.output:
            if state not in known:
                raise ModelError(f"output for unknown state {state!r}", field="output")
        if self.majority is not None:
            for state in self.majority:
                if state not in known:
                    raise ModelError(f"question names unknown state {state!r}", field="question")

    @property
    def population(self) -> int:
        """Number of agents, the sum of the initial counts."""
        return int(sum(self.initial.values()))

    def outcomes(self, initiator: str, responder: str) -> tuple[Outcome, ...]:
        """Return the non-null outcomes of an ordered pair (empty when it is null)."""
        return tuple(
            o
            for o in self.transitions.get((initiator, responder), ())
            if o.probability > 0 and (o.initiator, o.responder) != (initiator, responder)
        )

    def with_initial(self, initial: Mapping[str, int]) -> Protocol:
        """Return the same protocol with other initial counts."""
        return Protocol(
            self.name, self.states, self.transitions, dict(initial), self.output,
            self.majority, self.about,
        )
