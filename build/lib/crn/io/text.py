"""Plain-text export: one reaction per line in chemical notation, with its rate constant."""

from __future__ import annotations

from crn.core.network import Network

__all__ = ["network_to_text", "format_number"]


def format_number(x: float) -> str:
    """Shortest text that reads back as the same float; whole numbers without ``.0``.

    >>> format_number(2.0), format_number(0.5), format_number(1e-7)
    ('2', '0.5', '1e-07')
    """
    x = float(x)
    if x.is_integer() and abs(x) < 1e15:
        return str(int(x))
    return repr(x)


def network_to_text(net: Network) -> str:
    """Write a network as text.

    Comment lines (``#``) give the name, volume and initial counts; then one
    line per reaction, ``X + Y -> 2 X   rate 1``, with ``0`` for an empty
    side and the rate column aligned.

    Parameters
    ----------
    net : Network

    Returns
    -------
    str
        Ends with a newline.
    """
    lines = [f"# {net.name}", f"# volume {format_number(net.volume)}"]
    initial = ", ".join(f"{s} = {int(c)}" for s, c in zip(net.species, net.initial, strict=True))
    lines.append(f"# initial {initial}" if initial else "# initial (no species)")
    reactions = net.reactions()
    width = max((len(str(r)) for r in reactions), default=0)
    for r in reactions:
        lines.append(f"{str(r):<{width}}   rate {format_number(r.rate)}")
    return "\n".join(lines) + "\n"
