"""The JSON contract object of a network (docs/design.md, ``crn translate --json``) and its reader.

The object holds at least ``species``, ``initial``, ``volume`` and
``reactions`` (each ``{reactants: {name: mult}, products: {name: mult},
rate}``); it also carries ``name``, ``about``, ``output``, ``majority`` and
``from_protocol`` so that :func:`network_from_dict` rebuilds the identical
network, and ``ignore`` (species the consensus rule ignores) when there are any.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping

from crn.core.errors import ModelError
from crn.core.network import Network, Reaction

__all__ = ["network_to_dict", "network_from_dict", "network_to_json", "network_from_json"]


def _number(x: float) -> int | float:
    """A volume or rate as JSON shows it best: whole numbers without a fraction part."""
    x = float(x)
    return int(x) if x.is_integer() and abs(x) < 2**53 else x


def network_to_dict(net: Network) -> dict:
    """Return the contract object of a network.

    Parameters
    ----------
    net : Network

    Returns
    -------
    dict
        Keys ``name``, ``about``, ``species`` (list of str), ``initial``
        (name -> count), ``volume``, ``reactions`` (list of
        ``{"reactants": {name: mult}, "products": {name: mult}, "rate": k}``),
        ``output`` (name -> label), ``majority`` (two names or None) and
        ``from_protocol``; ``ignore`` (list of the species the consensus rule
        ignores) only when there are any. Only plain Python values: ``json.dumps``
        takes it.
    """
    out = {
        "name": net.name,
        "about": net.about,
        "species": list(net.species),
        "initial": {s: int(c) for s, c in zip(net.species, net.initial, strict=True)},
        "volume": _number(net.volume),
        "reactions": [
            {"reactants": dict(r.reactants), "products": dict(r.products),
             "rate": _number(r.rate)}
            for r in net.reactions()
        ],
        "output": dict(net.output),
        "majority": None if net.majority is None else list(net.majority),
        "from_protocol": bool(net.from_protocol),
    }
    if net.ignored:
        out["ignore"] = list(net.ignored)
    return out


def network_to_json(net: Network, indent: int | None = 2) -> str:
    """Return the contract object as JSON text (see :func:`network_to_dict`).

    Parameters
    ----------
    net : Network
    indent : int or None, default 2
        Indentation passed to :func:`json.dumps`; None for one line.

    Returns
    -------
    str
        The JSON text, ending with a newline.
    """
    return json.dumps(network_to_dict(net), indent=indent) + "\n"


def _fail(message, field, source):
    return ModelError(message, file=source, field=field)


def _side(value, field, source) -> dict[str, int]:
    if not isinstance(value, Mapping):
        raise _fail(f"expected an object of species -> multiplicity, got {value!r}", field, source)
    side = {}
    for name, m in value.items():
        if isinstance(m, bool) or not isinstance(m, int) or m < 1:
            raise _fail(f"multiplicity of {name!r} must be a whole number >= 1, got {m!r}",
                        field, source)
        side[str(name)] = m
    return side


def _real(value, field, source) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise _fail(f"expected a finite number, got {value!r}", field, source)
    return float(value)


def network_from_dict(data: Mapping, *, source: str = "<json>") -> Network:
    """Build a network from a contract object.

    Parameters
    ----------
    data : mapping
        With at least ``species``, ``reactions``; ``initial`` (default all
        zero), ``volume`` (default 1) and the optional keys of
        :func:`network_to_dict`.
    source : str
        Name used in error messages.

    Returns
    -------
    Network

    Raises
    ------
    ModelError
        Naming the field at fault (``reactions[2].rate``, ...).
    """
    if not isinstance(data, Mapping):
        raise _fail("the JSON document must be an object", None, source)
    species = data.get("species")
    if not isinstance(species, list) or not all(isinstance(s, str) for s in species):
        raise _fail("species must be a list of names", "species", source)
    initial = data.get("initial", {})
    if not isinstance(initial, Mapping):
        raise _fail("initial must be an object of name -> count", "initial", source)
    for name, count in initial.items():
        if isinstance(count, bool) or not isinstance(count, int) or count < 0:
            raise _fail(f"count of {name!r} must be a whole number >= 0, got {count!r}",
                        f"initial.{name}", source)
    volume = _real(data.get("volume", 1), "volume", source)
    items = data.get("reactions")
    if not isinstance(items, list):
        raise _fail("reactions must be a list", "reactions", source)
    reactions = []
    for i, item in enumerate(items):
        where = f"reactions[{i}]"
        if not isinstance(item, Mapping) or set(item) - {"reactants", "products", "rate"}:
            raise _fail("a reaction is {reactants: {...}, products: {...}, rate: k}", where,
                        source)
        reactions.append(Reaction(_side(item.get("reactants", {}), f"{where}.reactants", source),
                                  _side(item.get("products", {}), f"{where}.products", source),
                                  _real(item.get("rate"), f"{where}.rate", source)))
    output = data.get("output") or {}
    if not isinstance(output, Mapping) or not all(isinstance(v, str) for v in output.values()):
        raise _fail("output must be an object of name -> label", "output", source)
    majority = data.get("majority")
    if majority is not None and (not isinstance(majority, list) or len(majority) != 2):
        raise _fail("majority must be a list of two species names or null", "majority", source)
    from_protocol = data.get("from_protocol", False)
    if not isinstance(from_protocol, bool):
        raise _fail("from_protocol must be true or false", "from_protocol", source)
    ignore = data.get("ignore", [])
    if not isinstance(ignore, list) or not all(isinstance(s, str) for s in ignore):
        raise _fail("ignore must be a list of species names", "ignore", source)
    name = data.get("name", "network")
    about = data.get("about", "")
    if not isinstance(name, str) or not isinstance(about, str):
        raise _fail("name and about must be strings", "name", source)
    try:
        return Network.from_reactions(
            name, species, reactions, volume=volume, initial=dict(initial), output=dict(output),
            majority=None if majority is None else tuple(majority), from_protocol=from_protocol,
            about=about, ignore=ignore)
    except ModelError as err:
        raise err.located(file=source) from err


def network_from_json(text: str, *, source: str = "<json>") -> Network:
    """Parse JSON text holding a contract object (see :func:`network_from_dict`).

    Parameters
    ----------
    text : str
        The JSON document.
    source : str, default "<json>"
        Name used in error messages.

    Returns
    -------
    Network

    Raises
    ------
    ModelError
        On malformed JSON (with its line) or an invalid object.
    """
    try:
        data = json.loads(text)
    except json.JSONDecodeError as err:
        raise ModelError(f"malformed JSON: {err.msg}", file=source, line=err.lineno) from err
    except RecursionError as err:
        raise ModelError("malformed JSON: arrays or objects nested too deeply",
                         file=source) from err
    return network_from_dict(data, source=source)
