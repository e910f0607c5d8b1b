"""Decision labels of a DNA implementation: which species count toward a formal label.

A formal network decides when every molecule present reports one label. Its
DNA implementation holds the same molecules in several forms: free signal
strands, signals bound to a gate, and committed outputs waiting for the fuel
that releases them. The rule (:data:`DECISION_RULE`), applied by every scheme
when it builds its network, so that ``crn implement`` and every analysis read
the same labels:

* a signal species reports its formal label;
* an intermediate that carries strands of signal species (a signal bound
  reversibly to a gate, or sequestered by a buffering module) reports their
  common label;
* an intermediate that carries none but releases signals when it meets a fuel
  species (a committed output waiting for its translator or fork) reports the
  common label of its formal reaction's products;
* every other species (fuel, waste, a released by-product strand) is ignored.

Mixed labels, or signals that report none, give "no label": the species blocks
consensus while present, as the formal species it stands for would. So a
configuration of the implementation is in consensus exactly when the formal
configuration it stands for is, and the last minority molecule held in a gate
still counts.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np

from crn.core.network import IGNORED, Network

if TYPE_CHECKING:
    from crn.dna.implementation import Implementation

__all__ = ["DECISION_RULE", "IGNORE", "decision_labels", "held_matrix"]

#: The rule in one paragraph (``crn implement`` prints it; docs/design.md explains it).
DECISION_RULE = ("decisions are read from the signal species and from the intermediates "
                 "that stand for them: an intermediate holding signal strands counts as "
                 "those signals, a committed output waiting for its fuel counts as its "
                 "formal reaction's products, fuel, waste and released strands are ignored; "
                 "mixed or unlabelled contents block consensus")

#: Value :func:`decision_labels` gives a species the consensus rule ignores.
IGNORE = "ignore"


def _common(labels: Iterable[str | None]) -> str | None:
    found = set(labels)
    found.discard(IGNORE)
    if not found:
        return IGNORE
    return found.pop() if len(found) == 1 else None


def decision_labels(formal: Network, roles: Mapping[str, str],
                    strands: Mapping[str, Mapping[str, int]], modules: Sequence,
                    reactions: Sequence) -> dict[str, str | None]:
    """What each implementation species reports to the consensus rule.

    Parameters
    ----------
    formal : Network
        The formal network (its output labels, ignored species and reactions).
    roles : mapping of str to str
        Every implementation species -> ``signal``, ``fuel``, ``intermediate``
        or ``waste``.
    strands : mapping of str to mapping of str to int
        Every species -> its strands; signal X's strand is ``X_strand``.
    modules : sequence of crn.dna.Module
        The scheme's modules (which formal reaction an intermediate serves).
    reactions : sequence of Reaction
        The implementation reactions (rates do not matter).

    Returns
    -------
    dict of str to (str or None)
        Every species -> its label, None (reports no label: blocks consensus
        while present) or :data:`IGNORE`. See the module notes for the rule.
    """
    def own(s: str) -> str | None:
        k = int(formal.species_label[formal.index[s]])
        return IGNORE if k == IGNORED else (None if k < 0 else formal.labels[k])

    strand_of = {f"{s}_strand": s for s in formal.species}
    module_of = {s: m for m in modules for s in m.species}
    releases: set[str] = set()  # intermediates that meet a fuel species and release signals
    for r in reactions:
        if any(roles[x] == "fuel" for x in r.reactants) and \
                any(roles[x] == "signal" for x in r.products):
            releases.update(x for x in r.reactants if roles[x] == "intermediate")
    out: dict[str, str | None] = {}
    for s, role in roles.items():
        if role == "signal":
            out[s] = own(s)
            continue
        out[s] = IGNORE
        if role != "intermediate":
            continue
        held = [strand_of[k] for k, m in strands.get(s, {}).items() if m and k in strand_of]
        if held:
            out[s] = _common(own(x) for x in held)
            continue
        module = module_of.get(s)
        if s in releases and module is not None and module.formal is not None:
            products = formal.reaction(module.formal).products
            if products:
                out[s] = _common(own(x) for x in products)
    return out


def held_matrix(impl: Implementation) -> np.ndarray:
    """Signal strands each implementation species carries while not consumed.

    Parameters
    ----------
    impl : crn.dna.Implementation

    Returns
    -------
    ndarray of float64, shape (n_species, n_formal_species)
        Row of a signal species: 1 at itself; row of an intermediate: the
        number of each signal's strands it carries; fuel and waste rows are 0.
        ``counts @ held_matrix(impl)`` gives each formal species free plus held
        in gates.
    """
    net, formal = impl.network, impl.formal
    out = np.zeros((net.n_species, formal.n_species))
    strand_of = {f"{s}_strand": formal.index[s] for s in formal.species}
    for s, role in impl.roles.items():
        i = net.index[s]
        if role == "signal":
            out[i, formal.index[s]] = 1.0
        elif role == "intermediate":
            for k, m in impl.strands.get(s, {}).items():
                if k in strand_of:
                    out[i, strand_of[k]] += m
    return out
