"""Models: the parsed content of a model file, ready for the engines.

:func:`parse_model` turns the text of a TOML model (docs/design.md format) into a
:class:`Model`; it never touches the file system. Opening files (and running
trusted Python model files) is :mod:`crn.io.models`' job.
"""

from __future__ import annotations

import math
import re
import tomllib
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

from crn.core.errors import ExpressionError, ModelError
from crn.core.expr import evaluate
from crn.core.network import MAX_COUNT, NO_CONSENSUS, Network, Reaction
from crn.core.protocol import PROBABILITY_SLACK, Outcome, Protocol, is_identifier
from crn.core.translate import protocol_to_network

if TYPE_CHECKING:
    from collections.abc import Iterable

__all__ = ["ModelWarning", "Model", "Rule", "parse_model", "parse_overrides", "parse_rule",
           "parse_reaction"]

_TOP_KEYS = {"name", "about", "parameters", "initial", "protocol", "network", "output", "question"}
_TERM = re.compile(r"^(?:(\d+)\s*)?([A-Za-z_][A-Za-z0-9_]*)$")


class ModelWarning(UserWarning):
    """A model loads but contains something that is probably a mistake (a rule that never fires)."""


@dataclass(frozen=True)
class Rule:
    """One written transition rule, kept for reports (``crn check``)."""

    text: str
    line: int | None
    initiator: str
    responder: str
    outcome: Outcome
    mirrored: bool = False


@dataclass(frozen=True)
class Model:
    """A loaded model.

    Attributes
    ----------
    name, about : str
    source : str
        File the model came from (or ``"<string>"``).
    parameters : dict of str to number
        Parameter values after overrides.
    network : Network
        The reaction network every engine runs (the translation, for a protocol).
    protocol : Protocol or None
        The protocol, when the model is one.
    rules : tuple of Rule
        The rules as written (protocols only), with their lines.
    text : str
        The TOML text the model was parsed from ("" for models built otherwise:
        Python model files, exported networks), so that it can be parsed again
        with other parameter values.
    overrides : tuple of (str, number)
        The parameter values given on top of the text (``--set``), sorted by name.
    """

    name: str
    about: str
    source: str
    parameters: dict
    network: Network
    protocol: Protocol | None = None
    rules: tuple[Rule, ...] = field(default=())
    text: str = field(default="", repr=False)
    overrides: tuple = ()

    @property
    def kind(self) -> str:
        """``"protocol"`` or ``"network"``."""
        return "protocol" if self.protocol is not None else "network"


class _Locator:
    """Finds the line of a table key or a snippet in the model text, for error messages."""

    def __init__(self, text: str):
        self.lines = text.splitlines()

    def line(self, section: str | None = None, key: str | None = None, needle: str | None = None):
        current = None
        for number, raw in enumerate(self.lines, start=1):
            stripped = raw.strip()
            header = re.match(r"^\[\s*([A-Za-z0-9_.\-]+)\s*\]", stripped)
            if header:
                current = header.group(1)
                if section == current and key is None and needle is None:
                    return number
                continue
            if section is not None and current != section:
                continue
            if key is not None and re.match(rf"^\s*\"?{re.escape(key)}\"?\s*=", raw):
                return number
            if needle is not None and needle in raw and not stripped.startswith("#"):
                return number
        return None


def parse_overrides(pairs: Iterable[str] | None) -> dict[str, float | int]:
    """Parse ``NAME=VALUE`` strings (the ``--set`` option) into a dictionary.

    Parameters
    ----------
    pairs : iterable of str or None
        ``NAME=VALUE`` items; ``VALUE`` is a number or arithmetic expression.

    Returns
    -------
    dict of str to int or float
        Name -> value; a later item overrides an earlier one with the same name.

    Raises
    ------
    ModelError
        When an item has no ``=``, its name is not an identifier or its value
        is not a number.
    """
    out = {}
    for item in pairs or ():
        name, sep, value = item.partition("=")
        name = name.strip()
        if not sep or not is_identifier(name):
            raise ModelError(f"--set expects NAME=VALUE, got {item!r}", field="--set")
        try:
            out[name] = evaluate(value.strip())
        except ExpressionError as err:
            # a name in the value is not a parameter of the model: the value is simply not a number
            why = "" if "unknown parameter" in str(err) else f" ({str(err).split(': ', 1)[-1]})"
            raise ModelError(f"{value.strip()!r} is not a number for parameter {name}{why}",
                             field="--set") from err
    return out


def _count(value, expression, where: str, file, line):
    if isinstance(value, float):
        if not math.isfinite(value) or not value.is_integer():
            raise ModelError(
                f"{expression!r} gives {value!r}, not a whole number", file=file, line=line,
                field=where,
            )
        value = int(value)
    if value < 0:
        raise ModelError(f"{expression!r} gives {value}, a negative count", file=file, line=line,
                         field=where)
    if value > MAX_COUNT:
        raise ModelError(f"{expression!r} gives {value}, above the largest count 2**60",
                         file=file, line=line, field=where)
    return int(value)


def _expand_side(text: str, where: str, file, line) -> dict[str, int]:
    text = text.strip()
    if text == "0":
        return {}
    side: dict[str, int] = {}
    for term in text.split("+"):
        match = _TERM.match(term.strip())
        if not match:
            raise ModelError(f"cannot read {term.strip()!r} as a species with an optional count "
                             f"in {text!r}", file=file, line=line, field=where)
        count = int(match.group(1) or 1)
        if count == 0:
            continue
        side[match.group(2)] = side.get(match.group(2), 0) + count
    return side


def parse_reaction(text: str, *, where: str = "network.reactions", file: str | None = None,
                   line: int | None = None) -> tuple[dict[str, int], dict[str, int]]:
    """Parse ``"X + Y -> 2 U"`` (``0`` for an empty side) into reactant and product multisets.

    Parameters
    ----------
    text : str
        The reaction.
    where : str, default "network.reactions"
        Field named in error messages.
    file, line : optional
        File name and line number named in error messages.

    Returns
    -------
    (dict of str to int, dict of str to int)
        Reactants and products, species name -> multiplicity (repeated species
        added up, terms with count 0 left out).

    Raises
    ------
    ModelError
        If ``text`` is not a string with exactly one ``->`` or a term is not a
        species with an optional count.
    """
    if not isinstance(text, str) or text.count("->") != 1:
        raise ModelError(f"reaction {text!r} must have the form 'A + B -> C'", file=file,
                         line=line, field=where)
    left, right = text.split("->")
    return _expand_side(left, where, file, line), _expand_side(right, where, file, line)


def parse_rule(text: str, *, where: str = "protocol.transitions", file: str | None = None,
               line: int | None = None) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Parse ``"X, Y -> X, U"`` into ``((initiator, responder), (initiator', responder'))``.

    Parameters
    ----------
    text : str
        The rule.
    where : str, default "protocol.transitions"
        Field named in error messages.
    file, line : optional
        File name and line number named in error messages.

    Returns
    -------
    ((str, str), (str, str))
        The pair before and the pair after the interaction.

    Raises
    ------
    ModelError
        If ``text`` is not a string with exactly one ``->``, a side does not
        name exactly two states, or a name is not an identifier.
    """
    if not isinstance(text, str) or text.count("->") != 1:
        raise ModelError(f"rule {text!r} must have the form 'P, Q -> P2, Q2'", file=file,
                         line=line, field=where)
    sides = []
    for side in text.split("->"):
        agents = [a.strip() for a in side.split(",")]
        if len(agents) != 2:
            raise ModelError(
                f"rule {text!r} has {len(agents)} agent(s) on one side; "
                "each side names exactly two (initiator, responder)",
                file=file, line=line, field=where,
            )
        for a in agents:
            if not is_identifier(a):
                raise ModelError(
                    f"state name {a!r} in rule {text!r} is not an identifier "
                    "(letters, digits, _, not starting with a digit)",
                    file=file, line=line, field=where,
                )
        sides.append(tuple(agents))
    return sides[0], sides[1]


def parse_model(text: str, *, source: str = "<string>", overrides: Mapping | None = None) -> Model:
    """Parse the text of a TOML model file.

    Parameters
    ----------
    text : str
        The file's content (docs/design.md format).
    source : str
        File name used in error messages.
    overrides : mapping of str to number, optional
        Parameter values that replace those of ``[parameters]`` (``--set``).

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        For every invalid input, naming the file, the line when it can be
        found, and the field.

    Examples
    --------
    >>> model = parse_model('''
    ... name = "rumour"
    ... [parameters]
    ... n = 10
    ... [initial]
    ... I = 1
    ... S = "n - 1"
    ... [protocol]
    ... transitions = ["I, S -> I, I"]
    ... symmetric = true
    ... [output]
    ... I = "I"
    ... ''', overrides={"n": 50})
    >>> model.network.species, model.network.initial.tolist()
    (('I', 'S'), [1, 49])
    >>> [str(r) for r in model.network.reactions()]
    ['I + S -> 2 I']
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        match = re.search(r"line (\d+)", str(err))
        raise ModelError(f"malformed TOML: {err}", file=source,
                         line=int(match.group(1)) if match else None) from err
    except RecursionError as err:
        raise ModelError("malformed TOML: arrays or tables nested too deeply",
                         file=source) from err
    overrides = dict(overrides or {})
    model = _Builder(data, _Locator(text), source).build(overrides)
    return replace(model, text=text, overrides=tuple(sorted(overrides.items())))


class _Builder:
    def __init__(self, data, locator, source):
        self.data = data
        self.locate = locator
        self.file = source

    def error(self, message, section=None, key=None, needle=None, field_name=None):
        line = self.locate.line(section, key, needle)
        name = field_name or ".".join(p for p in (section, key) if p)
        return ModelError(message, file=self.file, line=line, field=name or None)

    def warn(self, line, where, message):
        place = self.file if line is None else f"{self.file}:{line}"
        warnings.warn(f"{place} [{where}]: {message}", ModelWarning, stacklevel=4)

    def table(self, key):
        value = self.data.get(key, {})
        if not isinstance(value, dict):
            raise self.error(f"[{key}] must be a table", key=key, field_name=key)
        return value

    def build(self, overrides) -> Model:
        data = self.data
        for key in data:
            if key not in _TOP_KEYS:
                expected = ", ".join(sorted(_TOP_KEYS))
                raise self.error(f"unknown key {key!r}; expected one of {expected}",
                                 key=key, field_name=key)
        name = data.get("name")
        if not isinstance(name, str) or not name.strip():
            raise self.error("a model needs a name: name = \"...\"", key="name", field_name="name")
        about = data.get("about", "")
        if not isinstance(about, str):
            raise self.error("about must be a string", key="about", field_name="about")
        params = self.parameters(overrides)
        initial = self.initial(params)
        has_protocol, has_network = "protocol" in data, "network" in data
        if has_protocol == has_network:
            raise ModelError("a model has exactly one of [protocol] and [network]", file=self.file,
                             field="protocol" if has_protocol else None)
        output = self.output()
        majority = self.question()
        if has_protocol:
            rules, transitions, states = self.protocol(initial)
            self.check_mentioned(states, output, majority)
            self.warn_undeclared(
                [(r.text, r.line, f"protocol.transitions[{i}]", (r.initiator, r.responder),
                  (r.outcome.initiator, r.outcome.responder))
                 for i, r in enumerate(r for r in rules if not r.mirrored)],
                initial, output, "rule")
            protocol = Protocol(name, states, transitions, initial, output, majority, about)
            network = protocol_to_network(protocol)
            return Model(name, about, self.file, params, network, protocol, tuple(rules))
        reactions, species, volume = self.network(initial, params)
        self.check_mentioned(species, output, majority)
        self.warn_undeclared(self.reaction_sites, initial, output, "reaction")
        try:
            network = Network.from_reactions(name, species, reactions, volume=volume,
                                             initial=initial, output=output, majority=majority,
                                             about=about)
        except ModelError as err:
            raise err.located(file=self.file, field="network") from err
        return Model(name, about, self.file, params, network)

    def parameters(self, overrides):
        raw = self.table("parameters")
        params = {}
        for key, value in raw.items():
            if not is_identifier(key):
                raise self.error(f"parameter name {key!r} is not an identifier", "parameters", key)
            if key in overrides:  # before later parameters that depend on it are evaluated
                params[key] = overrides[key]
                continue
            try:
                params[key] = evaluate(value, params)
            except ExpressionError as err:
                raise self.error(str(err), "parameters", key) from err
        for key in overrides:
            if key not in params:
                known = ", ".join(params) or "none"
                raise ModelError(f"--set names unknown parameter {key!r} (parameters: {known})",
                                 file=self.file, field=f"parameters.{key}")
        return params

    def initial(self, params):
        counts = {}
        for key, expression in self.table("initial").items():
            if not is_identifier(key):
                raise self.error(f"state name {key!r} is not an identifier", "initial", key)
            line = self.locate.line("initial", key)
            try:
                value = evaluate(expression, params)
            except ExpressionError as err:
                raise ModelError(str(err), file=self.file, line=line,
                                 field=f"initial.{key}") from err
            counts[key] = _count(value, expression, f"initial.{key}", self.file, line)
        return counts

    def output(self):
        out = {}
        for key, label in self.table("output").items():
            if not is_identifier(key):
                raise self.error(f"state name {key!r} is not an identifier", "output", key)
            if not isinstance(label, str) or not label:
                raise self.error(f"label of {key} must be a non-empty string", "output", key)
            if label == NO_CONSENSUS:
                raise self.error(f"label {label!r} is reserved for runs without consensus",
                                 "output", key)
            out[key] = label
        return out

    def question(self):
        question = self.table("question")
        for key in question:
            if key != "majority":
                raise self.error(f"unknown question {key!r}; expected majority", "question", key)
        if "majority" not in question:
            return None
        pair = question["majority"]
        if (not isinstance(pair, list) or len(pair) != 2
                or not all(is_identifier(s) for s in pair) or pair[0] == pair[1]):
            raise self.error("majority must list two different state names", "question",
                             "majority")
        return tuple(pair)

    def check_mentioned(self, states, output, majority):
        known = set(states)
        for state in output:
            if state not in known:
                raise self.error(f"state {state!r} appears in no rule and no initial count",
                                 "output", state)
        for state in majority or ():
            if state not in known:
                raise self.error(f"state {state!r} appears in no rule and no initial count",
                                 "question", "majority")

    def warn_undeclared(self, sites, initial, output, kind):
        """Warn once per state a rule names that is neither declared nor made by any rule
        (it can never be present), and once per unlabelled state a rule makes that is
        neither declared nor changed by any rule (once made it blocks consensus for good;
        protocols only: a network's waste species are made and left alone on purpose).

        ``sites`` lists ``(text, line, field, reactants, products)`` in written order.
        """
        declared = set(initial) | set(output)
        made = {s for *_, products in sites for s in products}
        used = {s for *_, reactants, _ in sites for s in reactants}
        warned = set()
        for text, line, where, reactants, products in sites:
            for s in reactants:
                if s not in declared and s not in made and s not in warned:
                    warned.add(s)
                    self.warn(line, where, f"{kind} {text!r} names state {s!r}, which has no "
                                           "initial count and no output label and which no "
                                           f"{kind} makes: it is never present (a typo?)")
            for s in products:
                if (kind == "rule" and output and s not in declared and s not in used
                        and s not in warned):
                    warned.add(s)
                    self.warn(line, where, f"{kind} {text!r} makes state {s!r}, which has no "
                                           f"output label and which no {kind} changes: once "
                                           "made it stays, and no consensus is possible")

    def protocol(self, initial):
        table = self.table("protocol")
        for key in table:
            if key not in ("transitions", "symmetric"):
                raise self.error(f"unknown key {key!r} in [protocol]", "protocol", key)
        symmetric = table.get("symmetric", False)
        if not isinstance(symmetric, bool):
            raise self.error("symmetric must be true or false", "protocol", "symmetric")
        items = table.get("transitions", [])
        if not isinstance(items, list):
            raise self.error("transitions must be a list", "protocol", "transitions")
        rules: list[Rule] = []
        for i, item in enumerate(items):
            where = f"protocol.transitions[{i}]"
            if isinstance(item, str):
                text, p = item, 1.0
            elif isinstance(item, dict):
                extra = set(item) - {"rule", "p"}
                text = item.get("rule")
                if extra or not isinstance(text, str):
                    raise self.error("a randomized rule is { rule = \"P, Q -> P2, Q2\", p = 0.5 }",
                                     "protocol", needle=str(text or ""), field_name=where)
                p = item.get("p", 1.0)
            else:
                raise self.error(f"rule must be a string or a table, got {item!r}", "protocol",
                                 "transitions", field_name=where)
            line = self.locate.line("protocol", needle=text)
            (a, b), (c, d) = parse_rule(text, where=where, file=self.file, line=line)
            if isinstance(p, bool) or not isinstance(p, int | float) or not 0 <= p <= 1:
                raise ModelError(f"p of rule {text!r} must be a number in [0, 1], got {p!r}",
                                 file=self.file, line=line, field=where)
            if p == 0:
                self.warn(line, where, f"rule {text!r} has p = 0 and never fires")
            rules.append(Rule(text, line, a, b, Outcome(c, d, float(p))))
        if symmetric:
            own = {(r.initiator, r.responder) for r in rules}
            for r in list(rules):
                if r.initiator != r.responder and (r.responder, r.initiator) not in own:
                    rules.append(Rule(r.text, r.line, r.responder, r.initiator,
                                      Outcome(r.outcome.responder, r.outcome.initiator,
                                              r.outcome.probability), mirrored=True))
        transitions: dict[tuple[str, str], list[Outcome]] = {}
        totals: dict[tuple[str, str], float] = {}
        for r in rules:
            pair = (r.initiator, r.responder)
            transitions.setdefault(pair, []).append(r.outcome)
            totals[pair] = totals.get(pair, 0.0) + r.outcome.probability
            if totals[pair] > 1 + PROBABILITY_SLACK:
                raise ModelError(
                    f"outcome probabilities of the pair ({pair[0]}, {pair[1]}) add up to "
                    f"{totals[pair]:g} > 1",
                    file=self.file, line=r.line, field="protocol.transitions",
                )
        states = list(initial)
        for r in rules:
            for s in (r.initiator, r.responder, r.outcome.initiator, r.outcome.responder):
                if s not in states:
                    states.append(s)
        return rules, {k: tuple(v) for k, v in transitions.items()}, tuple(states)

    def network(self, initial, params):
        table = self.table("network")
        for key in table:
            if key not in ("volume", "reactions"):
                raise self.error(f"unknown key {key!r} in [network]", "network", key)
        try:
            volume = float(evaluate(table.get("volume", 1), params))
        except ExpressionError as err:
            raise self.error(str(err), "network", "volume") from err
        if not math.isfinite(volume) or volume <= 0:
            raise self.error(f"volume must be positive, got {volume:g}", "network", "volume")
        items = table.get("reactions", [])
        if not isinstance(items, list):
            raise self.error("reactions must be a list", "network", "reactions")
        reactions = []
        self.reaction_sites = []
        species = list(initial)
        for i, item in enumerate(items):
            where = f"network.reactions[{i}]"
            if not isinstance(item, dict) or not isinstance(item.get("reaction"), str):
                raise self.error("a reaction is { reaction = \"A + B -> C\", rate = 1.0 }",
                                 "network", "reactions", field_name=where)
            text = item["reaction"]
            line = self.locate.line("network", needle=text)
            extra = set(item) - {"reaction", "rate"}
            if extra:
                raise ModelError(f"unknown key(s) {', '.join(sorted(extra))} in reaction {text!r}",
                                 file=self.file, line=line, field=where)
            reactants, products = parse_reaction(text, where=where, file=self.file, line=line)
            try:
                rate = float(evaluate(item.get("rate", 1.0), params))
            except ExpressionError as err:
                raise ModelError(str(err), file=self.file, line=line, field=where) from err
            if not math.isfinite(rate) or rate < 0:
                raise ModelError(f"rate of {text!r} must be >= 0, got {rate:g}", file=self.file,
                                 line=line, field=where)
            for s in list(reactants) + list(products):
                if s not in species:
                    species.append(s)
            if rate == 0:
                self.warn(line, where, f"reaction {text!r} has rate 0 and never fires")
            reactions.append(Reaction(reactants, products, rate))
            self.reaction_sites.append((text, line, where, tuple(reactants), tuple(products)))
        return reactions, tuple(species), volume
