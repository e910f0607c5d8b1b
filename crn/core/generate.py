"""Protocols generated from a rule function over record-like states.

Some protocols are easier to write as a function than as a table: a state is a
record of fields (a frozen dataclass, a named tuple or a plain tuple) and a
rule function says what two states become. :func:`protocol_from_rule` finds
every state reachable from the initial ones by breadth-first closure and
builds an ordinary :class:`~crn.core.protocol.Protocol` from it.
"""

from __future__ import annotations

import dataclasses
import re
from collections import deque
from collections.abc import Callable, Hashable, Mapping

from crn.core.errors import ModelError
from crn.core.protocol import Outcome, Protocol

__all__ = ["protocol_from_rule", "state_name", "DEFAULT_MAX_STATES"]

DEFAULT_MAX_STATES = 10_000


def state_name(state: object) -> str:
    """An identifier for a record-like state: its field values joined by ``_``.

    ``("strong", 1)`` becomes ``strong_1``; a dataclass ``Agent(opinion="A",
    strong=True)`` becomes ``A_True``; a string that is already an identifier
    stays as it is.

    Parameters
    ----------
    state : dataclass instance, tuple or object
        The state; anything else than a dataclass or tuple is one field.

    Returns
    -------
    str
        The joined values, with ``-`` written ``m``, other characters that are
        not letters, digits or ``_`` written ``_``, and ``s_`` in front when
        the result is empty or starts with a digit.
    """
    if dataclasses.is_dataclass(state):
        values = [getattr(state, f.name) for f in dataclasses.fields(state)]
    elif isinstance(state, tuple):
        values = list(state)
    else:
        values = [state]
    text = "_".join(str(v) for v in values)
    text = re.sub(r"[^A-Za-z0-9_]", "_", text.replace("-", "m"))
    if not text or text[0].isdigit():
        text = "s_" + text
    return text


def _outcomes(result, a, b) -> list[tuple[float, Hashable, Hashable]]:
    """Normalise what a rule returns into (probability, initiator', responder') triples."""
    if result is None:
        return []
    if isinstance(result, tuple) and len(result) == 2 and _is_single_weighted(result):
        raise ModelError(f"rule({a!r}, {b!r}) returned one randomized outcome {result!r}; "
                         "wrap randomized outcomes in a list: [(p, (a2, b2)), ...]", field="rule")
    if isinstance(result, tuple) and len(result) == 2 and not _is_weighted(result):
        return [(1.0, result[0], result[1])]
    out = []
    for item in result:
        if not (isinstance(item, tuple) and len(item) == 2 and isinstance(item[1], tuple)
                and len(item[1]) == 2):
            raise ModelError(
                f"rule({a!r}, {b!r}) must return (a2, b2), a list of (p, (a2, b2)) or None; "
                f"got {result!r}", field="rule")
        p, (c, d) = item
        out.append((float(p), c, d))
    return out


def _is_single_weighted(result) -> bool:
    p, pair = result
    return (isinstance(p, float) and isinstance(pair, tuple) and len(pair) == 2)


def _is_weighted(result) -> bool:
    first = result[0]
    return (isinstance(first, tuple) and len(first) == 2 and isinstance(first[0], int | float)
            and isinstance(first[1], tuple))


def protocol_from_rule(
    name: str,
    rule: Callable,
    initial: Mapping[Hashable, int],
    *,
    output: Callable[[Hashable], str | None] | None = None,
    majority: tuple[Hashable, Hashable] | None = None,
    about: str = "",
    max_states: int = DEFAULT_MAX_STATES,
    naming: Callable[[Hashable], str] = state_name,
) -> Protocol:
    """Build a protocol from a rule function by breadth-first closure.

    Parameters
    ----------
    name : str
    rule : callable ``rule(initiator, responder)``
        Returns the new ``(initiator, responder)``, a list of
        ``(probability, (initiator, responder))`` for randomized outcomes, or
        None for a null interaction. States must be hashable.
    initial : mapping of state to int
        Initial counts; states with count 0 still seed the closure.
    output : callable ``output(state) -> str or None``, optional
        Label a state reports.
    majority : (state, state), optional
        The two input states.
    about : str
    max_states : int, default 10000
        Refuse to go on when the closure finds more states than this.
    naming : callable, default :func:`state_name`
        Turns a state into an identifier.

    Returns
    -------
    Protocol

    Raises
    ------
    ModelError
        When the closure exceeds ``max_states``, two states get the same name,
        or the rule returns something malformed.

    Examples
    --------
    >>> def rule(a, b):
    ...     return (a, a) if a == "I" else None
    >>> p = protocol_from_rule("epidemic", rule, {"I": 1, "S": 9})
    >>> p.states
    ('I', 'S')
    """
    order: list = list(initial)
    seen = set(order)
    queue = deque(order)
    transitions: dict = {}
    while queue:
        a = queue.popleft()
        for b in list(order):
            for pair in ((a, b), (b, a)) if a != b else ((a, a),):
                if pair in transitions:
                    continue
                outs = _outcomes(rule(*pair), *pair)
                transitions[pair] = outs
                for _, c, d in outs:
                    for s in (c, d):
                        if s not in seen:
                            seen.add(s)
                            order.append(s)
                            queue.append(s)
                            if len(order) > max_states:
                                raise ModelError(
                                    f"the closure of the rule exceeds {max_states} states; "
                                    "raise max_states or check the rule", field="max_states")
    for state in majority or ():
        if state not in seen:
            raise ModelError(f"majority names {state!r}, which the closure never reaches",
                             field="majority")
    names = {s: naming(s) for s in order}
    if len(set(names.values())) != len(names):
        raise ModelError("two states get the same name; pass naming=", field="naming")
    table = {
        (names[a], names[b]): tuple(Outcome(names[c], names[d], p) for p, c, d in outs)
        for (a, b), outs in transitions.items() if outs
    }
    labels = {}
    if output is not None:
        for s in order:
            label = output(s)
            if label is not None:
                labels[names[s]] = str(label)
    return Protocol(
        name,
        tuple(names[s] for s in order),
        table,
        {names[s]: int(c) for s, c in initial.items()},
        labels,
        None if majority is None else (names[majority[0]], names[majority[1]]),
        about,
    )
