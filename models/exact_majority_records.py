"""Four-state exact majority written as a rule over record states (trusted Python model).

Each agent is a record ``Agent(opinion, strength)``: opinion ``"A"`` or
``"B"``, strength ``"strong"`` or ``"weak"``. Two opposite strong opinions
cancel into weak ones; a strong opinion turns an opposing weak agent into a
weak agent of its own opinion. The states are found by closure from the two
strong inputs, giving the same network as ``exact_majority.toml``.

Mertzios, Nikoletseas, Raptopoulos, Spirakis, "Determining majority in
networks with local interactions and very small local memory", ICALP 2014 /
Distributed Computing 30(1), 2017.

Load it like any model (``crn translate models/exact_majority_records.py
--set n=50``); being Python, it runs code, so load only files you trust.
"""

from dataclasses import dataclass

from crn.core.errors import ModelError
from crn.core.generate import protocol_from_rule

PARAMETERS = {"n": 100, "gap": 2}


@dataclass(frozen=True)
class Agent:
    opinion: str
    strength: str


def rule(a: Agent, b: Agent):
    """What an (initiator, responder) pair becomes; None when nothing happens."""
    if a.opinion == b.opinion:
        return None
    if a.strength == "strong" and b.strength == "strong":
        return Agent(a.opinion, "weak"), Agent(b.opinion, "weak")
    if a.strength == "strong":
        return a, Agent(a.opinion, "weak")
    if b.strength == "strong":
        return Agent(b.opinion, "weak"), b
    return None


def build(parameters):
    n, gap = parameters["n"], parameters["gap"]
    if (n + gap) % 2 or not 0 <= gap <= n:
        raise ModelError(f"n + gap must be even with 0 <= gap <= n, got n={n}, gap={gap}",
                         field="PARAMETERS")
    strong_a, strong_b = Agent("A", "strong"), Agent("B", "strong")
    return protocol_from_rule(
        "four-state exact majority (records)",
        rule,
        {strong_a: (n + gap) // 2, strong_b: (n - gap) // 2},
        output=lambda s: s.opinion,
        majority=(strong_a, strong_b),
        about=__doc__.split("\n\n")[2].replace("\n", " "),
    )
