"""Static inspection of a model (``crn check``): reachable states, dead rules, lost labels.

Nothing here simulates: reachability is the closure of the set of states with
a nonzero initial count under the rules (a rule fires once all its reactant
states are reachable, counts are ignored), so it over-approximates what a run
can reach and every rule reported dead is truly dead.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

from crn.core.model import Model
from crn.core.network import Network, Reaction
from crn.core.protocol import Protocol

__all__ = ["RuleReport", "CheckReport", "reachable_species", "check_model"]


@dataclass(frozen=True)
class RuleReport:
    """What inspection found about one rule (protocol) or reaction (network).

    Attributes
    ----------
    text : str
        The rule as written (``"X, Y -> X, B"``) or the reaction (``"X + Y -> 2 X"``).
    line : int or None
        Line in the model file, when known.
    molecules_in, molecules_out : int
        Agents (molecules) consumed and produced; 2 and 2 for every protocol rule.
    can_fire : bool
        False when a reactant state is unreachable or the rule has probability (rate) 0.
    unreachable_reactants : tuple of str
        The reactant states that no run can reach.
    changes_state : bool
        False for a rule whose outcome equals its pair as a multiset (no effect).
    """

    text: str
    line: int | None
    molecules_in: int
    molecules_out: int
    can_fire: bool
    unreachable_reactants: tuple[str, ...] = ()
    changes_state: bool = True

    @property
    def conserves(self) -> bool:
        """Whether the rule keeps the number of agents (molecules)."""
        return self.molecules_in == self.molecules_out

    @property
    def net_change(self) -> int:
        """Molecules produced minus molecules consumed."""
        return self.molecules_out - self.molecules_in

    def to_dict(self) -> dict:
        """A JSON-ready dictionary (one entry of ``rules`` in ``crn check --json``).

        Returns
        -------
        dict
            Keys ``rule``, ``line``, ``conserves``, ``net_change``, ``can_fire``,
            ``unreachable_reactants`` (list of str) and ``changes_state``.
        """
        return {
            "rule": self.text,
            "line": self.line,
            "conserves": self.conserves,
            "net_change": self.net_change,
            "can_fire": self.can_fire,
            "unreachable_reactants": list(self.unreachable_reactants),
            "changes_state": self.changes_state,
        }


@dataclass(frozen=True)
class CheckReport:
    """The result of :func:`check_model`.

    Attributes
    ----------
    name : str
    kind : str
        ``"protocol"`` or ``"network"``.
    states : tuple of str
        All states (species), in model order.
    initial_states : tuple of str
        States with a nonzero initial count.
    reachable, unreachable : tuple of str
        States the closure reaches, and the others.
    rules : tuple of RuleReport
    unreachable_labels : tuple of str
        Output labels that no reachable state reports.
    warnings : tuple of str
        One sentence per oddity found.
    """

    name: str
    kind: str
    states: tuple[str, ...]
    initial_states: tuple[str, ...]
    reachable: tuple[str, ...]
    unreachable: tuple[str, ...]
    rules: tuple[RuleReport, ...]
    unreachable_labels: tuple[str, ...]
    warnings: tuple[str, ...] = field(default=())

    @property
    def dead_rules(self) -> tuple[RuleReport, ...]:
        """Rules that can never fire."""
        return tuple(r for r in self.rules if not r.can_fire)

    def to_dict(self) -> dict:
        """A JSON-ready dictionary (the ``crn check --json`` object)."""
        return {
            "name": self.name,
            "kind": self.kind,
            "states": list(self.states),
            "initial_states": list(self.initial_states),
            "reachable": list(self.reachable),
            "unreachable": list(self.unreachable),
            "rules": [r.to_dict() for r in self.rules],
            "conserves_agents": all(r.conserves for r in self.rules),
            "dead_rules": [r.text for r in self.dead_rules],
            "unreachable_labels": list(self.unreachable_labels),
            "warnings": list(self.warnings),
        }


def reachable_species(net: Network, start: Iterable[str] | None = None) -> set[str]:
    """Species reachable from ``start`` under the reactions of a network (set closure).

    Parameters
    ----------
    net : Network
    start : iterable of str, optional
        Species present at the start; by default those with a nonzero initial count.

    Returns
    -------
    set of str
        ``start`` plus every product of a reaction with positive rate whose
        reactant species are all reachable (reactions with no reactants always fire).
    """
    found = set(start) if start is not None else {
        s for s, c in zip(net.species, net.initial, strict=True) if c > 0}
    reactions = [r for r in net.reactions() if r.rate > 0]
    grew = True
    while grew:
        grew = False
        for r in reactions:
            if set(r.reactants) <= found and not set(r.products) <= found:
                found |= set(r.products)
                grew = True
    return found


def _protocol_rules(model: Model, protocol: Protocol, reachable: set[str]) -> list[RuleReport]:
    if model.rules:
        items = [(r.text if not r.mirrored else f"{r.initiator}, {r.responder} -> "
                  f"{r.outcome.initiator}, {r.outcome.responder} (mirror of {r.text!r})",
                  r.line, r.initiator, r.responder, r.outcome)
                 for r in model.rules]
    else:
        items = [(f"{p}, {q} -> {o.initiator}, {o.responder}"
                  + ("" if o.probability == 1 else f" (p = {o.probability:g})"), None, p, q, o)
                 for (p, q), outcomes in protocol.transitions.items() for o in outcomes]
    reports = []
    for text, line, p, q, outcome in items:
        missing = tuple(dict.fromkeys(s for s in (p, q) if s not in reachable))
        reports.append(RuleReport(
            text, line, 2, 2, can_fire=not missing and outcome.probability > 0,
            unreachable_reactants=missing,
            changes_state=sorted((outcome.initiator, outcome.responder)) != sorted((p, q)),
        ))
    return reports


def _reaction_report(reaction: Reaction, reachable: set[str]) -> RuleReport:
    missing = tuple(s for s in reaction.reactants if s not in reachable)
    return RuleReport(
        str(reaction), None, reaction.order, int(sum(reaction.products.values())),
        can_fire=not missing and reaction.rate > 0, unreachable_reactants=missing,
        changes_state=dict(reaction.reactants) != dict(reaction.products),
    )


def check_model(model: Model) -> CheckReport:
    """Inspect a model without running it.

    Parameters
    ----------
    model : Model

    Returns
    -------
    CheckReport
        States, reachable states, per-rule agent conservation and
        firability, output labels no reachable state reports, and warnings
        (unreachable states, dead or ineffective rules, lost labels, an
        empty population). Warnings are returned, not issued: reporting
        oddities is this function's job.
    """
    net = model.network
    reachable = reachable_species(net)
    initial_states = tuple(s for s, c in zip(net.species, net.initial, strict=True) if c > 0)
    if model.protocol is not None:
        rules = _protocol_rules(model, model.protocol, reachable)
    else:
        rules = [_reaction_report(r, reachable) for r in net.reactions()]
    unreachable = tuple(s for s in net.species if s not in reachable)
    labels = tuple(
        label for label in net.labels
        if not any(net.label_of(s) == label for s in reachable)
    )
    warnings = []
    if not initial_states and model.protocol is not None:
        warnings.append("the population is empty: no state has a nonzero initial count")
    if rules and not any(r.can_fire for r in rules):
        warnings.append("no rule can ever fire")
    if unreachable:
        warnings.append(f"state(s) {', '.join(unreachable)} can never be reached")
    for r in rules:
        if r.unreachable_reactants:
            warnings.append(f"rule {r.text!r} can never fire: "
                            f"{', '.join(r.unreachable_reactants)} unreachable")
        elif not r.can_fire:
            warnings.append(f"rule {r.text!r} has probability (rate) 0")
        if not r.changes_state:
            warnings.append(f"rule {r.text!r} changes nothing (same states before and after)")
    for label in labels:
        warnings.append(f"no reachable state reports the label {label!r}")
    return CheckReport(
        name=model.name, kind=model.kind, states=tuple(net.species),
        initial_states=initial_states,
        reachable=tuple(s for s in net.species if s in reachable), unreachable=unreachable,
        rules=tuple(rules), unreachable_labels=labels, warnings=tuple(warnings),
    )

