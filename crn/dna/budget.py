"""How much fuel a whole decision consumes, against the fuel supplied, and the gate inventory.

The expected number of firings of each formal reaction up to the decision is
the mean-field estimate: the formal ODE is solved with one counter per
reaction (a species each firing makes and no reaction uses, ignored by the
consensus rule) up to the formal mean-field consensus, or to the horizon when
there is none. Each firing of formal reaction R consumes the fuel molecules of
its module (:attr:`crn.dna.Module.fuel_per_firing`: one gate and one
translator in the 2010 construction).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from crn.core.network import Network, Reaction
from crn.dna.implementation import Implementation

__all__ = ["FuelBudget", "decision_fuel", "Inventory", "inventory"]


@dataclass(frozen=True)
class FuelBudget:
    """Fuel one decision consumes (mean-field estimate).

    Attributes
    ----------
    time : float
        Formal time of the mean-field decision (or the horizon when none).
    decided : bool
        Whether the formal mean field reached consensus.
    firings : dict of int to float
        Formal reaction index -> expected firings (molecules) up to ``time``.
    consumed : dict of str to float
        Fuel species -> concentration consumed (M).
    supplied : dict of str to float
        Fuel species -> concentration supplied (M).
    """

    time: float
    decided: bool
    firings: dict[int, float]
    consumed: dict[str, float]
    supplied: dict[str, float]

    @property
    def total_consumed(self) -> float:
        """Fuel consumed, all species together (M)."""
        return float(sum(self.consumed.values()))

    @property
    def total_supplied(self) -> float:
        """Fuel supplied, all species together (M)."""
        return float(sum(self.supplied.values()))

    @property
    def total_firings(self) -> float:
        """Expected formal reaction firings up to the decision."""
        return float(sum(self.firings.values()))

    @property
    def worst(self) -> tuple[str | None, float]:
        """The fuel species used up the most, and the fraction of it consumed."""
        best, frac = None, 0.0
        for s, used in self.consumed.items():
            f = used / self.supplied[s]
            if f > frac:
                best, frac = s, f
        return best, frac


def _with_counters(formal: Network) -> tuple[Network, list[str]]:
    counters = []
    taken = set(formal.species)
    for i in range(formal.n_reactions):
        name = f"fired_{i + 1}"
        while name in taken:
            name += "_"
        taken.add(name)
        counters.append(name)
    reactions = []
    for i, r in enumerate(formal.reactions()):
        products = dict(r.products)
        products[counters[i]] = 1
        reactions.append(Reaction(dict(r.reactants), products, r.rate))
    net = Network.from_reactions(
        formal.name, list(formal.species) + counters, reactions, volume=formal.volume,
        initial={s: int(c) for s, c in zip(formal.species, formal.initial, strict=True)},
        output=formal.output, majority=formal.majority, from_protocol=formal.from_protocol,
        ignore=counters)
    return net, counters


def decision_fuel(impl: Implementation, until: float | None = None) -> FuelBudget:
    """Fuel one decision of the formal network consumes in the implementation.

    Parameters
    ----------
    impl : Implementation
    until : float, optional
        Horizon in formal time; default that of :func:`crn.solvers.ode.solve_mean_field`.

    Returns
    -------
    FuelBudget
    """
    from crn.solvers.ode import molecules_per_unit, solve_mean_field

    net, counters = _with_counters(impl.formal)
    result = solve_mean_field(net, until=until)
    end = result.values[-1] if result.values.shape[0] else np.zeros(net.n_species)
    scale = molecules_per_unit(net)
    firings = {i: float(end[net.index[c]]) * scale for i, c in enumerate(counters)}
    consumed = {s: 0.0 for s in impl.fuel}
    for module in impl.modules:
        if module.formal is None:
            continue
        for s, per in module.fuel_per_firing.items():
            consumed[s] += firings[module.formal] * per / impl.molecules_per_molar
    decided = result.consensus.label is not None
    time = result.consensus.time
    if time is None:
        time = float(result.times[-1])
    return FuelBudget(time=float(time), decided=decided, firings=firings, consumed=consumed,
                      supplied=dict(impl.fuel))


@dataclass(frozen=True)
class Inventory:
    """The DNA that one implementation needs.

    Attributes
    ----------
    per_reaction : dict of int to (int, int)
        Formal reaction index -> (fuel complexes, strands in them) of its module.
    buffer_complexes, buffer_strands : int
        The same for all buffering modules together.
    """

    per_reaction: dict[int, tuple[int, int]]
    buffer_complexes: int
    buffer_strands: int

    @property
    def mean_complexes(self) -> float:
        """Fuel complexes per formal reaction (buffering excluded)."""
        values = [c for c, _ in self.per_reaction.values()]
        return float(np.mean(values)) if values else 0.0

    @property
    def mean_strands(self) -> float:
        """Strands per formal reaction (buffering excluded)."""
        values = [s for _, s in self.per_reaction.values()]
        return float(np.mean(values)) if values else 0.0


def inventory(impl: Implementation) -> Inventory:
    """Count the fuel complexes (species supplied) and their strands, module by module.

    Parameters
    ----------
    impl : Implementation

    Returns
    -------
    Inventory
    """
    per, buf_c, buf_s = {}, 0, 0
    for module in impl.modules:
        fuels = [s for s in module.species if impl.roles[s] == "fuel"]
        strands = sum(sum(impl.strands[s].values()) for s in fuels)
        if module.formal is None:
            buf_c += len(fuels)
            buf_s += strands
        else:
            per[module.formal] = (len(fuels), strands)
    return Inventory(per_reaction=per, buffer_complexes=buf_c, buffer_strands=buf_s)
