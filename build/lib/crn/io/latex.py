"""LaTeX export: the reactions as an ``align*`` block (needs the amsmath package)."""

from __future__ import annotations

from collections.abc import Mapping

from crn.core.network import Network
from crn.io.text import format_number

__all__ = ["network_to_latex", "latex_number"]


def latex_number(x: float) -> str:
    """A rate constant in LaTeX: ``0.5``, ``2``, ``1.5 \\times 10^{-7}``."""
    text = format_number(x)
    if "e" not in text:
        return text
    mantissa, exponent = text.split("e")
    power = f"10^{{{int(exponent)}}}"
    return power if mantissa == "1" else f"{mantissa} \\times {power}"


def _species(name: str) -> str:
    return "\\mathrm{" + name.replace("_", "\\_") + "}"


def _side(side: Mapping[str, int]) -> str:
    terms = [_species(s) if m == 1 else f"{m}\\,{_species(s)}" for s, m in side.items()]
    return " + ".join(terms) if terms else "\\varnothing"


def network_to_latex(net: Network) -> str:
    """Write the reactions of a network as a LaTeX ``align*`` block.

    Each line is ``reactants &\\xrightarrow{k} products``; species names are
    set upright with ``_`` escaped, an empty side is ``\\varnothing``.

    Parameters
    ----------
    net : Network

    Returns
    -------
    str
        From ``\\begin{align*}`` to ``\\end{align*}``, ending with a newline.
    """
    rows = [
        f"  {_side(r.reactants)} &\\xrightarrow{{{latex_number(r.rate)}}} {_side(r.products)}"
        for r in net.reactions()
    ]
    return "\\begin{align*}\n" + " \\\\\n".join(rows) + ("\n" if rows else "") + "\\end{align*}\n"
