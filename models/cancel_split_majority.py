"""Exact majority by cancelling and splitting opinion tokens over a bounded number of levels.

Each agent is a record ``Token(opinion, level)``. A *strong* agent carries a token
worth ``2**-level`` of its opinion ``"A"`` or ``"B"`` (levels 0..``levels``); a
*weak* agent (level ``None``) carries no value and only reports the opinion it
last adopted. The total worth ``sum(+2**-level for A) - sum(2**-level for B)``
never changes, so it keeps the sign of the initial gap:

- two opposite tokens of the same level cancel into two weak agents;
- opposite tokens one level apart leave one token at the deeper level
  (``2**-i - 2**-(i+1) = 2**-(i+1)``);
- a token above the deepest level splits with a weak agent into two tokens one
  level deeper, converting it;
- a token at the deepest level converts a weak agent of the other opinion.

Cancellation of opposite tokens with splitting of tokens into halves is the
mechanism of the exact-majority protocol of Alistarh, Gelashvili and Vojnovic,
"Fast and exact majority in population protocols", PODC 2015; this bounded-level
variant is a small teaching version whose correctness for small populations is
checked with ``crn verify`` (notebooks/design_and_verify.ipynb), not proved.

Set ``broken = 1`` to get a deliberately wrong variant in which opposite tokens
one level apart merge into the *initiator's* opinion, so the total worth is not
conserved and a minority can win.

Being Python, this file runs code when loaded: load only files you trust.
"""

from dataclasses import dataclass

from crn.core.errors import ModelError
from crn.core.generate import protocol_from_rule

PARAMETERS = {"n": 100, "gap": 2, "levels": 1, "broken": 0}


@dataclass(frozen=True, order=True)
class Token:
    opinion: str
    level: int | None  # None: a weak agent


def _name(t: Token) -> str:
    return f"{t.opinion}{'w' if t.level is None else t.level}"


def make_rule(levels: int, broken: bool):
    """The transition rule over tokens with levels 0..levels."""

    def rule(a: Token, b: Token):
        if a.level is not None and b.level is not None:
            if a.opinion == b.opinion:
                return None
            if a.level == b.level:
                return Token(a.opinion, None), Token(b.opinion, None)
            if abs(a.level - b.level) == 1:
                deep = max(a.level, b.level)
                shallow = a if a.level < b.level else b
                winner = a.opinion if broken else shallow.opinion
                return Token(winner, deep), Token(winner, None)
            return None
        if a.level is None and b.level is None:
            return None
        strong, weak = (a, b) if a.level is not None else (b, a)
        if strong.level < levels:
            half = Token(strong.opinion, strong.level + 1)
            return (half, half)
        if weak.opinion == strong.opinion:
            return None
        converted = Token(strong.opinion, None)
        return (strong, converted) if strong is a else (converted, strong)

    return rule


def build(parameters):
    n, gap = int(parameters["n"]), int(parameters["gap"])
    levels, broken = int(parameters["levels"]), bool(parameters["broken"])
    if (n + gap) % 2 or not 0 <= gap <= n:
        raise ModelError(f"n + gap must be even with 0 <= gap <= n, got n={n}, gap={gap}",
                         field="PARAMETERS")
    if not 0 <= levels <= 8:
        raise ModelError(f"levels must lie in 0..8, got {levels}", field="PARAMETERS")
    a0, b0 = Token("A", 0), Token("B", 0)
    title = "cancel-and-split exact majority" + (" (broken variant)" if broken else "")
    return protocol_from_rule(
        f"{title}, {levels} levels",
        make_rule(levels, broken),
        {a0: (n + gap) // 2, b0: (n - gap) // 2},
        output=lambda t: t.opinion,
        majority=(a0, b0),
        naming=_name,
        about="Cancel-and-split exact majority with bounded levels (after Alistarh, "
              "Gelashvili, Vojnovic, PODC 2015).",
    )
