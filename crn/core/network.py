"""The one in-memory reaction network that every engine reads.

A :class:`Network` is built once (by the translator, a model file or an SBML
import) and never changed: its arrays are read-only, so engines can share it
between threads and processes without copying.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import scipy.sparse as sp
    from numpy.typing import ArrayLike

from crn.core.errors import ModelError
from crn.core.protocol import is_identifier

__all__ = ["MAX_COUNT", "MAX_MULTIPLICITY", "NO_CONSENSUS", "IGNORED", "Reaction", "Network",
           "propensities", "deterministic_rates", "format_side"]


#: Largest molecule count (and population) a network may hold: the range of the batched
#: engine, and far from int64 overflow when counts are added.
MAX_COUNT = 2**60
_MAX_POWER = MAX_COUNT.bit_length() - 1
#: Largest multiplicity of a species on one side of a reaction.
MAX_MULTIPLICITY = 1000
#: The label that stands for "no consensus" in every tally; no species may report it.
NO_CONSENSUS = "none"
#: Value of ``Network.species_label`` for a species the consensus rule ignores (fuel,
#: gates, intermediates and waste of a DNA implementation): it neither reports a label
#: nor breaks consensus. -1 stays "reports nothing", which breaks consensus.
IGNORED = -2


@dataclass(frozen=True)
class Reaction:
    """One reaction: reactant and product multisets (name -> multiplicity) and a rate constant."""

    reactants: Mapping[str, int]
    products: Mapping[str, int]
    rate: float

    @property
    def order(self) -> int:
        """Number of reactant molecules."""
        return int(sum(self.reactants.values()))

    def __str__(self) -> str:
        return f"{format_side(self.reactants)} -> {format_side(self.products)}"


def format_side(side: Mapping[str, int]) -> str:
    """Write a multiset in chemical notation: ``2 A + B``, or ``0`` when empty.

    Parameters
    ----------
    side : mapping of str to int
        Species name -> multiplicity; entries with multiplicity 0 are left out.

    Returns
    -------
    str
    """
    terms = [name if m == 1 else f"{m} {name}" for name, m in side.items() if m > 0]
    return " + ".join(terms) if terms else "0"


def _frozen(array, dtype):
    out = np.array(array, dtype=dtype)
    out.flags.writeable = False
    return out


def _pad(sides: Sequence[Mapping[str, int]], index: Mapping[str, int]):
    width = max((len(side) for side in sides), default=0)
    width = max(width, 1)
    species = np.full((len(sides), width), -1, dtype=np.int64)
    counts = np.zeros((len(sides), width), dtype=np.int64)
    for row, side in enumerate(sides):
        for col, (name, m) in enumerate(sorted(side.items(), key=lambda kv: index[kv[0]])):
            species[row, col] = index[name]
            counts[row, col] = m
    return species, counts

def _species_index(species: tuple[str, ...]) -> dict[str, int]:
    """Species name -> position, after checking the names."""
    if not species:
        raise ModelError("a network needs at least one species", field="species")
    index = {s: i for i, s in enumerate(species)}
    if len(index) != len(species):
        raise ModelError("a species is listed twice", field="species")
    for s in species:
        if not is_identifier(s):
            raise ModelError(f"species name {s!r} is not an identifier", field="species")
    return index


def _check_reactions(reactions: Sequence[Reaction], index: Mapping[str, int]) -> None:
    """Refuse unknown species, bad multiplicities and negative or non-finite rates."""
    for i, r in enumerate(reactions):
        where = f"reactions[{i}]"
        for side in (r.reactants, r.products):
            for s, m in side.items():
                if s not in index:
                    raise ModelError(f"reaction {r} names unknown species {s!r}", field=where)
                if (isinstance(m, bool) or not isinstance(m, int | np.integer)
                        or not 1 <= m <= MAX_MULTIPLICITY):
                    raise ModelError(f"reaction {r}: multiplicity of {s} must be a whole "
                                     f"number from 1 to {MAX_MULTIPLICITY}", field=where)
        if not np.isfinite(r.rate) or r.rate < 0:
            raise ModelError(f"reaction {r}: rate must be a finite number >= 0, got {r.rate}",
                             field=where)


def _initial_counts(initial: Mapping[str, int], index: Mapping[str, int]) -> np.ndarray:
    """The initial counts as a vector in species order, checked."""
    x0 = np.zeros(len(index), dtype=np.int64)
    for s, c in initial.items():
        if s not in index:
            raise ModelError(f"initial count for unknown species {s!r}", field="initial")
        whole = isinstance(c, int | np.integer) and not isinstance(c, bool)
        if not whole or not 0 <= c <= MAX_COUNT:
            raise ModelError(f"initial count of {s} must be a whole number from 0 to "
                             f"2**{_MAX_POWER}, got {c!r}", field=f"initial.{s}")
        x0[index[s]] = c
    if sum(int(c) for c in x0) > MAX_COUNT:
        raise ModelError(f"the initial counts add up to more than 2**{_MAX_POWER}",
                         field="initial")
    return x0


def _species_labels(output: dict[str, str], ignore: Sequence[str],
                    index: Mapping[str, int]) -> tuple[tuple[str, ...], np.ndarray]:
    """The labels in first-seen order and each species' label index (-1 none, IGNORED)."""
    labels = tuple(dict.fromkeys(output.values()))
    label_index = {label: i for i, label in enumerate(labels)}
    species_label = np.full(len(index), -1, dtype=np.int64)
    for s, label in output.items():
        if s not in index:
            raise ModelError(f"output for unknown species {s!r}", field="output")
        if label == NO_CONSENSUS:
            raise ModelError(f"label {label!r} of {s} is reserved for runs without consensus",
                             field=f"output.{s}")
        species_label[index[s]] = label_index[label]
    for s in ignore:
        if s not in index:
            raise ModelError(f"ignored species {s!r} is not a species", field="ignore")
        if species_label[index[s]] >= 0:
            raise ModelError(f"species {s} reports a label and cannot be ignored",
                             field="ignore")
        species_label[index[s]] = IGNORED
    return labels, species_label


@dataclass(frozen=True, eq=False)
class Network:
    """A mass-action reaction network with its initial state and decision data.

    Attributes
    ----------
    name : str
    species : tuple of str, shape (n_species,)
    reactant_species, reactant_counts : ndarray of int64, shape (n_reactions, width)
        Reactant species indices and multiplicities, one row a reaction,
        padded with species ``-1`` and multiplicity 0.
    product_species, product_counts : ndarray of int64, shape (n_reactions, width)
        The same for products.
    rates : ndarray of float64, shape (n_reactions,)
        Rate constants.
    volume : float
        Volume v of the propensity convention (``n - 1`` for a protocol of n agents).
    initial : ndarray of int64, shape (n_species,)
        Initial molecule counts.
    labels : tuple of str
        The distinct output labels.
    species_label : ndarray of int64, shape (n_species,)
        Index into ``labels`` of the label each species reports, -1 for none
        (the species breaks consensus while present), :data:`IGNORED` (-2) for a
        species the consensus rule ignores.
    inputs : tuple of (int, int) or None
        Species indices of the two input states the question compares.
    from_protocol : bool
        True when the network is the translation of a population protocol
        (then the population is conserved and time is parallel time).
    about : str
    """

    name: str
    species: tuple[str, ...]
    reactant_species: np.ndarray
    reactant_counts: np.ndarray
    product_species: np.ndarray
    product_counts: np.ndarray
    rates: np.ndarray
    volume: float
    initial: np.ndarray
    labels: tuple[str, ...] = ()
    species_label: np.ndarray = field(default=None)  # type: ignore[arg-type]  # set by from_reactions
    inputs: tuple[int, int] | None = None
    from_protocol: bool = False
    about: str = ""

    @classmethod
    def from_reactions(
        cls,
        name: str,
        species: Sequence[str],
        reactions: Sequence[Reaction],
        *,
        volume: float = 1.0,
        initial: Mapping[str, int] | None = None,
        output: Mapping[str, str] | None = None,
        majority: tuple[str, str] | None = None,
        from_protocol: bool = False,
        about: str = "",
        ignore: Sequence[str] = (),
    ) -> Network:
        """Build a network from named reactions.

        Parameters
        ----------
        name : str
        species : sequence of str
            Species order; every species a reaction names must be listed.
        reactions : sequence of Reaction
        volume : float, default 1.0
        initial : mapping of str to int, optional
        output : mapping of str to str, optional
            Label each species reports.
        majority : (str, str), optional
            The two input species.
        from_protocol : bool, default False
        about : str
        ignore : sequence of str, default ()
            Species the consensus rule ignores: they neither report a label nor
            break consensus (the non-signal species of a DNA implementation).
            A species cannot both report a label and be ignored.

        Raises
        ------
        ModelError
            If a name is not an identifier or not a species, a multiplicity or
            count is negative, a rate is negative or the volume is not positive.
        """
        species = tuple(species)
        index = _species_index(species)
        _check_reactions(reactions, index)
        if not np.isfinite(volume) or volume <= 0:
            raise ModelError(f"volume must be positive, got {volume}", field="volume")
        rs, rc = _pad([r.reactants for r in reactions], index)
        ps, pc = _pad([r.products for r in reactions], index)
        x0 = _initial_counts(initial or {}, index)
        labels, species_label = _species_labels(dict(output or {}), ignore, index)
        inputs = None
        if majority is not None:
            if len(majority) != 2 or not all(isinstance(s, str) for s in majority):
                raise ModelError(f"the question names two species, got {majority!r}",
                                 field="question")
            for s in majority:
                if s not in index:
                    raise ModelError(f"question names unknown species {s!r}", field="question")
            inputs = (index[majority[0]], index[majority[1]])
        return cls(
            name=name,
            species=species,
            reactant_species=_frozen(rs, np.int64),
            reactant_counts=_frozen(rc, np.int64),
            product_species=_frozen(ps, np.int64),
            product_counts=_frozen(pc, np.int64),
            rates=_frozen([r.rate for r in reactions], np.float64),
            volume=float(volume),
            initial=_frozen(x0, np.int64),
            labels=labels,
            species_label=_frozen(species_label, np.int64),
            inputs=inputs,
            from_protocol=from_protocol,
            about=about,
        )

    # -- shape -----------------------------------------------------------------
    @property
    def n_species(self) -> int:
        """Number of species."""
        return len(self.species)

    @property
    def n_reactions(self) -> int:
        """Number of reactions."""
        return int(self.rates.shape[0])

    @property
    def population(self) -> int:
        """Total initial molecule count (the number of agents for a protocol)."""
        return int(self.initial.sum())

    @cached_property
    def index(self) -> dict[str, int]:
        """Species name -> index."""
        return {s: i for i, s in enumerate(self.species)}

    @cached_property
    def orders(self) -> np.ndarray:
        """Number of reactant molecules of each reaction, shape (n_reactions,)."""
        out = self.reactant_counts.sum(axis=1)
        out.flags.writeable = False
        return out

    @cached_property
    def reactant_matrix(self) -> sp.csr_matrix:
        """Reactant multiplicities, sparse, shape (n_species, n_reactions)."""
        return _side_matrix(self.reactant_species, self.reactant_counts, self.n_species)

    @cached_property
    def product_matrix(self) -> sp.csr_matrix:
        """Product multiplicities, sparse, shape (n_species, n_reactions)."""
        return _side_matrix(self.product_species, self.product_counts, self.n_species)

    @cached_property
    def stoichiometry(self) -> sp.csr_matrix:
        """Net change of each species by each reaction, sparse, shape (n_species, n_reactions)."""
        out = (self.product_matrix - self.reactant_matrix).tocsr()
        out.eliminate_zeros()
        return out

    def reaction(self, i: int) -> Reaction:
        """Return reaction ``i`` as a named :class:`Reaction`.

        Parameters
        ----------
        i : int
            Reaction index, ``0 <= i < n_reactions``.

        Returns
        -------
        Reaction
        """
        def side(species, counts):
            pairs = zip(species[i], counts[i], strict=True)
            return {self.species[s]: int(m) for s, m in pairs if s >= 0}

        return Reaction(
            side(self.reactant_species, self.reactant_counts),
            side(self.product_species, self.product_counts),
            float(self.rates[i]),
        )

    def reactions(self) -> list[Reaction]:
        """All reactions as named :class:`Reaction` objects."""
        return [self.reaction(i) for i in range(self.n_reactions)]

    def label_of(self, species: str) -> str | None:
        """The label a species reports, or None.

        Parameters
        ----------
        species : str
            Species name.

        Returns
        -------
        str or None

        Raises
        ------
        KeyError
            If ``species`` is not a species of the network.
        """
        k = int(self.species_label[self.index[species]])
        return None if k < 0 else self.labels[k]

    @property
    def output(self) -> dict[str, str]:
        """Species name -> label, for the species that report one."""
        pairs = zip(self.species, self.species_label, strict=True)
        return {s: self.labels[k] for s, k in pairs if k >= 0}

    @property
    def ignored(self) -> tuple[str, ...]:
        """Names of the species the consensus rule ignores (see :data:`IGNORED`)."""
        pairs = zip(self.species, self.species_label, strict=True)
        return tuple(s for s, k in pairs if k == IGNORED)

    @property
    def majority(self) -> tuple[str, str] | None:
        """Names of the two input species, or None."""
        if self.inputs is None:
            return None
        return self.species[self.inputs[0]], self.species[self.inputs[1]]

    def with_initial(self, initial: Mapping[str, int] | ArrayLike,
                     volume: float | None = None) -> Network:
        """Return the same network with other initial counts (and optionally volume).

        Parameters
        ----------
        initial : mapping of str to int, or array_like of int, shape (n_species,)
            New initial counts; species a mapping leaves out start at 0.
        volume : float, optional
            New volume. By default the volume is kept, except for a network
            translated from a protocol, where it becomes ``max(n - 1, 1)`` for the
            new population n.

        Returns
        -------
        Network

        Raises
        ------
        ValueError
            If the counts do not have shape (n_species,) or one is negative.
        KeyError
            If a mapping names an unknown species.
        """
        if isinstance(initial, Mapping):
            x0 = np.zeros(self.n_species, dtype=np.int64)
            for s, c in initial.items():
                x0[self.index[s]] = c
        else:
            x0 = np.asarray(initial, dtype=np.int64)
        if x0.shape != (self.n_species,) or (x0 < 0).any():
            raise ValueError("`initial` must hold one non-negative count per species")
        if volume is None and self.from_protocol:
            volume = max(int(x0.sum()) - 1, 1)
        return _replace(self, initial=_frozen(x0, np.int64), volume=float(volume or self.volume))

    def with_rates(self, rates: ArrayLike) -> Network:
        """Return the same network with other rate constants.

        Parameters
        ----------
        rates : array_like of float, shape (n_reactions,)
            New rate constants, in reaction order (not validated).

        Returns
        -------
        Network
        """
        return _replace(self, rates=_frozen(rates, np.float64))


def _replace(net: Network, **changes) -> Network:
    import dataclasses

    return dataclasses.replace(net, **changes)


def _side_matrix(species, counts, n_species):
    import scipy.sparse as sp

    rows, cols = np.nonzero(species >= 0)
    data = counts[rows, cols]
    return sp.csr_matrix(
        (data.astype(np.float64), (species[rows, cols], rows)),
        shape=(n_species, species.shape[0]),
    )


def propensities(net: Network, x: ArrayLike) -> np.ndarray:
    """Stochastic propensities at molecule counts ``x``.

    ``k * prod_s x_s (x_s - 1) ... (x_s - r_s + 1) / v**(order - 1)``: ordered
    tuples, so ``2 A`` counts ``x_A (x_A - 1)`` with no division by 2.

    Parameters
    ----------
    net : Network
    x : array_like of int, shape (n_species,)

    Returns
    -------
    ndarray of float64, shape (n_reactions,)

    References
    ----------
    Condon, Hajiaghayi, Kirkpatrick, Manuch, Natural Computing 2020 (the convention).
    """
    x = np.asarray(x, dtype=np.float64)
    padded = np.where(net.reactant_species >= 0, x[net.reactant_species], 0.0)
    factor = np.ones_like(padded)
    for j in range(int(net.reactant_counts.max(initial=0))):
        factor *= np.where(net.reactant_counts > j, padded - j, 1.0)
    factor = np.clip(factor, 0.0, None)
    return net.rates * factor.prod(axis=1) / net.volume ** (net.orders - 1.0)


def deterministic_rates(net: Network, c: ArrayLike) -> np.ndarray:
    """Mass-action reaction rates ``k * prod_s c_s**r_s`` at concentrations ``c``.

    Parameters
    ----------
    net : Network
    c : array_like of float, shape (n_species,)
        Concentrations.

    Returns
    -------
    ndarray of float64, shape (n_reactions,)
    """
    c = np.asarray(c, dtype=np.float64)
    padded = np.where(net.reactant_species >= 0, c[net.reactant_species], 1.0)
    return net.rates * (padded ** net.reactant_counts).prod(axis=1)
