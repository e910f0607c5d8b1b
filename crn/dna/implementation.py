"""The result of implementing a formal network in DNA, and the builder schemes use.

A scheme describes its implementation in lab units: species with a role
(``signal``, ``fuel``, ``intermediate``, ``waste``), the strands each species is
made of, initial fuel concentrations in M, and reactions with physical rate
constants (/s for unimolecular, /M/s for bimolecular). :class:`Builder` turns
that description into a :class:`~crn.core.network.Network` in the formal network's
own units, so every engine's times compare directly with the formal run:

* counts: the formal volume v stands for the signal concentration C, so one
  molecule is ``C / v`` molar and a fuel at F molar starts with
  ``round(F v / C)`` molecules (for a protocol v = n - 1);
* time: one formal time unit (parallel time for a protocol) lasts
  ``1 / (rate C)`` seconds;
* rates: a bimolecular constant q (/M/s) becomes ``q / rate``, a unimolecular
  one k (/s) becomes ``k / (rate C)``.

Signal species keep their formal names, labels and question. Which other
species count toward a decision is the rule of :mod:`crn.dna.labels`
(intermediates count as the signals they hold, fuel and waste are ignored),
applied here once, so ``crn implement`` and every analysis read the same
labels.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from crn.core.errors import CRNError
from crn.core.network import IGNORED, MAX_COUNT, Network, Reaction
from crn.core.protocol import is_identifier
from crn.dna.labels import IGNORE, decision_labels
from crn.dna.parameters import DnaParameterError, DnaParameters

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

__all__ = ["ROLES", "Implementation", "Module", "Builder", "formal_reactions", "signal_strands",
           "add_strands", "buffer_modules", "order_reactants", "implement_each"]

#: The roles an implementation species can have, in display order.
ROLES = ("signal", "fuel", "intermediate", "waste")


@dataclass(frozen=True)
class Module:
    """The part of an implementation that realises one formal reaction (or buffers a species).

    Attributes
    ----------
    formal : int or None
        Index of the formal reaction, None for a buffering module.
    buffers : str or None
        The formal species a buffering module buffers.
    species : tuple of str
        The non-signal species of the module.
    fuel_per_firing : dict of str to int
        Fuel molecules one firing of the formal reaction consumes.
    """

    formal: int | None
    buffers: str | None
    species: tuple[str, ...]
    fuel_per_firing: dict[str, int]


@dataclass(frozen=True, eq=False)
class Implementation:
    """A formal network implemented by a DNA scheme.

    Attributes
    ----------
    scheme : str
        Key of the scheme in :data:`crn.dna.SCHEMES`.
    formal : Network
        The formal network.
    network : Network
        The implementation, in the formal network's volume convention and time
        unit (see the module notes), its species labelled for the consensus
        rule by :func:`crn.dna.labels.decision_labels`.
    roles : dict of str to str
        Every implementation species -> ``signal``, ``fuel``, ``intermediate``
        or ``waste``.
    fuel : dict of str to float
        Fuel species -> initial concentration (M).
    params : DnaParameters
    physical_rates : ndarray of float64, shape (n_reactions,)
        Rate constant of each implementation reaction in lab units: /s for a
        unimolecular reaction, /M/s for a bimolecular one.
    strands : dict of str to dict of str to int
        Every species -> its strands (strand name -> number), the domain-level
        make-up that every reaction conserves.
    modules : tuple of Module
    leak_reactions : tuple of int
        Indices of the leak reactions in ``network``.
    molecules_per_molar : float
        Molecules in the formal volume per M: ``formal.volume / C``.
    """

    scheme: str
    formal: Network
    network: Network
    roles: dict[str, str]
    fuel: dict[str, float]
    params: DnaParameters
    physical_rates: np.ndarray = field(repr=False)
    strands: dict[str, dict[str, int]] = field(repr=False, default_factory=dict)
    modules: tuple[Module, ...] = ()
    leak_reactions: tuple[int, ...] = ()
    molecules_per_molar: float = 1.0

    @property
    def decision_labels(self) -> dict[str, str | None]:
        """Species the consensus rule reads -> the label each reports (None: blocks consensus).

        The signal species and the intermediates that stand for them
        (:mod:`crn.dna.labels`); the species left out are ignored.
        """
        net = self.network
        return {s: None if k < 0 else net.labels[k]
                for s, k in zip(net.species, net.species_label, strict=True) if k != IGNORED}

    def species_with_role(self, role: str) -> list[str]:
        """The species with ``role``, in network order."""
        return [s for s in self.network.species if self.roles[s] == role]

    def fuel_remaining(self, counts: ArrayLike) -> dict[str, float]:
        """Fraction of each fuel species left at molecule counts ``counts``.

        Parameters
        ----------
        counts : array_like, shape (n_species,)
            Counts of the implementation species (or ODE values times
            ``molecules_per_unit``).

        Returns
        -------
        dict of str to float
            Fuel species -> count / initial count.
        """
        x = np.asarray(counts, dtype=np.float64)
        if x.shape != (self.network.n_species,):
            raise ValueError(f"`counts` must have shape ({self.network.n_species},), "
                             f"got {x.shape}")
        out = {}
        for s in self.fuel:
            i = self.network.index[s]
            start = float(self.network.initial[i])
            out[s] = float(x[i]) / start if start > 0 else 0.0
        return out

    def seconds(self, time: float) -> float:
        """Seconds in ``time`` formal time units."""
        return float(time) * self.params.seconds_per_time_unit


class Builder:
    """Collects a scheme's species, strands and lab-unit reactions; builds the Implementation.

    Parameters
    ----------
    formal : Network
    params : DnaParameters
    scheme : str
    """

    def __init__(self, formal: Network, params: DnaParameters, scheme: str):
        self.formal = formal
        self.params = params
        self.scheme = scheme
        self.roles: dict[str, str] = {}
        self.strands: dict[str, dict[str, int]] = {}
        self.fuel: dict[str, float] = {}
        self.reactions: list[Reaction] = []  # rates in lab units
        self.leaks: list[int] = []
        self.modules: list[Module] = []
        for s in formal.species:
            self.roles[s] = "signal"
            self.strands[s] = {f"{s}_strand": 1}

    def name(self, wanted: str) -> str:
        """A fresh species name based on ``wanted`` (suffixed with ``_`` while taken)."""
        out = wanted
        while out in self.roles:
            out += "_"
        if not is_identifier(out):
            raise CRNError(f"cannot name implementation species {out!r}")
        return out

    def add(self, wanted: str, role: str, strands: Mapping[str, int],
            fuel: float | None = None) -> str:
        """Add a species; ``fuel`` is its initial concentration (M) when its role is fuel."""
        if role not in ROLES:
            raise ValueError(f"unknown role {role!r}")
        name = self.name(wanted)
        self.roles[name] = role
        self.strands[name] = {k: int(v) for k, v in strands.items() if v}
        if role == "fuel":
            self.fuel[name] = float(self.params.fuel_molar if fuel is None else fuel)
        return name

    def react(self, reactants: Mapping[str, int], products: Mapping[str, int], rate: float,
              *, leak: bool = False) -> int:
        """Add a reaction with its lab-unit rate (/s or /M/s); returns its index."""
        order = sum(reactants.values())
        if order not in (1, 2):
            raise CRNError(f"a DNA reaction has one or two reactants, got {order}")
        if not np.isfinite(rate) or rate < 0:
            raise CRNError(f"rate of {format_reaction(reactants, products)} must be >= 0, "
                           f"got {rate}")
        self.reactions.append(Reaction(dict(reactants), dict(products), float(rate)))
        if leak:
            self.leaks.append(len(self.reactions) - 1)
        return len(self.reactions) - 1

    def bind(self, signal: str, gate: str, held: str, buffer: str, rate: float) -> None:
        """Add the reversible binding ``signal + gate <-> held + buffer``: forward at ``rate``
        (/M/s), back at q_max.
        """
        self.react({signal: 1, gate: 1}, {held: 1, buffer: 1}, rate)
        self.react({held: 1, buffer: 1}, {signal: 1, gate: 1}, self.params.q_max)

    def first_step(self, index: int, reaction: Reaction,
                   load: dict[str, float]) -> tuple[str, str, float]:
        """The first step of bimolecular formal reaction ``index``: its rate k (/M/s), checked
        against q_max, and its reactants in order (:func:`order_reactants`); adds k to the
        first reactant's ``load``.

        Returns
        -------
        x1, x2 : str
            The reactant that binds the first gate and the one that meets the complex.
        k : float
            The first step's rate constant (/M/s).
        """
        k = reaction.rate * self.params.rate
        self.check_displacement(k, f"formal reaction {index + 1} ({reaction})")
        x1, x2 = order_reactants(self.formal, reaction.reactants, load)
        load[x1] += k
        return x1, x2, k

    def check_displacement(self, rate: float, what: str) -> None:
        """Raise when a displacement step needs a rate above q_max."""
        q_max = self.params.q_max
        if rate > q_max * (1 + 1e-12):
            raise DnaParameterError(
                f"{what} needs a strand-displacement rate constant of {rate:.3g} /M/s, above "
                f"the maximum {q_max:.3g} /M/s: lower the rate or raise max_rate (or the "
                f"toehold)", "rate")

    def build(self) -> Implementation:
        """Convert to formal units and return the :class:`Implementation`."""
        formal, p = self.formal, self.params
        volume = float(formal.volume)
        per_molar = volume / p.concentration
        species = list(self.roles)
        initial = {s: int(c) for s, c in zip(formal.species, formal.initial, strict=True)}
        for s, molar in self.fuel.items():
            count = molar * per_molar
            if count > MAX_COUNT:
                raise DnaParameterError(f"fuel {s} at {molar:.3g} M makes {count:.3g} molecules, "
                                        f"more than the engines hold", "fuel")
            initial[s] = int(round(count))
            if initial[s] < 1:
                raise DnaParameterError(
                    f"fuel {s} at {molar:.3g} M is less than one molecule in the formal volume "
                    f"({per_molar:.3g} molecules per M)", "fuel")
        formal_reactions = []
        physical = []
        for r in self.reactions:
            unit = p.rate if r.order == 2 else p.rate * p.concentration
            formal_reactions.append(Reaction(r.reactants, r.products, r.rate / unit))
            physical.append(r.rate)
        labels = decision_labels(formal, self.roles, self.strands, self.modules, self.reactions)
        rank = {label: k for k, label in enumerate(formal.labels)}
        output = dict(sorted(((s, v) for s, v in labels.items() if v not in (None, IGNORE)),
                             key=lambda item: rank.get(item[1], len(rank))))
        ignore = [s for s in species if labels[s] == IGNORE]
        net = Network.from_reactions(
            f"{formal.name} ({self.scheme} DNA implementation)", species, formal_reactions,
            volume=volume, initial=initial, output=output, majority=formal.majority,
            from_protocol=False, about=formal.about, ignore=ignore)
        physical_rates = np.array(physical, dtype=np.float64)
        physical_rates.flags.writeable = False
        return Implementation(
            scheme=self.scheme, formal=formal, network=net, roles=dict(self.roles),
            fuel=dict(self.fuel), params=p, physical_rates=physical_rates,
            strands={s: dict(v) for s, v in self.strands.items()},
            modules=tuple(self.modules), leak_reactions=tuple(self.leaks),
            molecules_per_molar=per_molar)


def format_reaction(reactants: Mapping[str, int], products: Mapping[str, int]) -> str:
    """``A + B -> C`` for two multisets."""
    return str(Reaction(dict(reactants), dict(products), 0.0))


def formal_reactions(formal: Network, scheme: str):
    """Formal reactions that do something, checked for order (one or two reactants)."""
    out = []
    for i, r in enumerate(formal.reactions()):
        if r.rate == 0 or dict(r.reactants) == dict(r.products):
            continue
        if r.order not in (1, 2):
            raise CRNError(f"formal reaction {i + 1} ({r}) has {r.order} reactants; the {scheme} "
                           f"scheme implements reactions with one or two reactants")
        out.append((i, r))
    return out


def signal_strands(side) -> dict[str, int]:
    """The signal strands of a multiset of formal species (one ``X_strand`` per molecule)."""
    return {f"{s}_strand": m for s, m in side.items()}


def add_strands(*parts) -> dict[str, int]:
    """Sum strand multisets."""
    total: Counter[str] = Counter()
    for part in parts:
        total.update(part)
    return dict(total)


def order_reactants(formal: Network, reactants: Mapping[str, int],
                    load: dict[str, float]) -> tuple[str, str]:
    """First and second reactant of a bimolecular reaction: the first is the one with the
    smaller first-step load so far (ties: network order), which keeps the largest load,
    and so the buffering every species needs, small.
    """
    names = sorted(reactants, key=lambda s: (load[s], formal.index[s]))
    return names[0], names[1] if len(names) > 1 else names[0]


def buffer_modules(b: Builder, load: dict[str, float]) -> None:
    """Buffering modules: every formal species sequestered at the same total first-step rate."""
    q_max = b.params.q_max
    top = max(load.values(), default=0.0)
    if top <= 0:
        return
    for x, s in load.items():
        missing = top - s
        if missing <= top * 1e-12:
            continue
        parts = max(1, math.ceil(missing / q_max * (1 - 1e-12)))
        for j in range(parts):
            tag = f"{x}_{j + 1}" if parts > 1 else x
            bottom, top_strand = f"buf_{tag}_bottom", f"buf_{tag}_top"
            gate = b.add(f"LS_{tag}", "fuel", {bottom: 1, top_strand: 1})
            buffer = b.add(f"BS_{tag}", "fuel", {top_strand: 1})
            held = b.add(f"HS_{tag}", "intermediate", {bottom: 1, f"{x}_strand": 1})
            b.bind(x, gate, held, buffer, missing / parts)
            b.modules.append(Module(formal=None, buffers=x, species=(gate, buffer, held),
                                    fuel_per_firing={}))


def implement_each(formal: Network, params: DnaParameters, scheme: str,
                   module_of: Callable[[Builder, int, Reaction, dict[str, float]], None],
                   check: Callable[[int, Reaction], None] | None = None) -> Implementation:
    """The frame every scheme shares: a module per formal reaction, then the buffering modules.

    Parameters
    ----------
    formal : Network
    params : DnaParameters
    scheme : str
    module_of : callable
        ``module_of(builder, index, reaction, load)`` adds the species, reactions and
        :class:`Module` of one formal reaction that does something
        (:func:`formal_reactions`), and adds to ``load`` (formal species -> total first-step
        rate, /M/s) what its first step binds.
    check : callable, optional
        ``check(index, reaction)`` raises for a reaction the scheme cannot build; run on every
        reaction before any is built, so that error comes first.

    Returns
    -------
    Implementation
    """
    b = Builder(formal, params, scheme)
    reactions = formal_reactions(formal, scheme)
    if check is not None:
        for i, r in reactions:
            check(i, r)
    load = {s: 0.0 for s in formal.species}
    for i, r in reactions:
        module_of(b, i, r, load)
    buffer_modules(b, load)
    return b.build()
