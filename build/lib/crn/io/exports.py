"""Export formats by name, and the thin function that writes them to files.

Reading network files (JSON, SBML) goes through :func:`crn.io.models.load_model`.
"""

from __future__ import annotations

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.io.atomic import write_atomic
from crn.io.contract import network_to_json
from crn.io.latex import network_to_latex
from crn.io.sbml import network_to_sbml
from crn.io.text import network_to_text

__all__ = ["FORMATS", "export_network", "write_network"]

#: Format name -> function writing a network as text.
FORMATS = {
    "text": network_to_text,
    "json": network_to_json,
    "sbml": network_to_sbml,
    "latex": network_to_latex,
}


def export_network(net: Network, fmt: str) -> str:
    """Write a network in one of :data:`FORMATS`.

    Raises
    ------
    CRNError
        For an unknown format name.
    """
    try:
        writer = FORMATS[fmt]
    except KeyError:
        raise CRNError(f"unknown format {fmt!r}; expected one of {', '.join(FORMATS)}") from None
    return writer(net)


def write_network(net: Network, fmt: str, path) -> None:
    """Export a network (see :func:`export_network`) to a file, atomically."""
    write_atomic(path, export_network(net, fmt))
