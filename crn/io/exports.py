"""Export formats by name, and the thin functions that read and write their files."""

from __future__ import annotations

from pathlib import Path

from ..errors import CRNError, ModelError
from ..network import Network
from .atomic import write_atomic
from .contract import network_from_json, network_to_json
from .latex import network_to_latex
from .sbml import network_from_sbml, network_to_sbml
from .text import network_to_text

__all__ = ["FORMATS", "export_network", "write_network", "read_sbml",
           "read_network_json"]

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


def _read(path) -> str:
    path = Path(path)
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ModelError("no such file", file=path) from None
    except (OSError, UnicodeDecodeError) as err:
        raise ModelError(f"cannot read the file: {err}", file=path) from err


def read_sbml(path) -> Network:
    """Read a mass-action network from an SBML file (see :func:`crn.io.sbml.network_from_sbml`)."""
    return network_from_sbml(_read(path), source=str(path))


def read_network_json(path) -> Network:
    """Read a network from a JSON contract file (see :func:`crn.io.contract.network_from_json`)."""
    return network_from_json(_read(path), source=str(path))
