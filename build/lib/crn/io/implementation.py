"""A DNA implementation as text (grouped by role, lab units) and as its JSON object.

The JSON object is the network contract of the implementation network
(:func:`crn.io.contract.network_to_dict`: loadable as a network, rates in the
formal network's units) plus ``scheme``, ``roles``, ``fuel`` (species ->
molar), ``formal`` (the formal network's contract object), ``parameters`` (lab
units, defaults applied), ``lab_rates`` (per reaction ``{rate, unit}`` in /M/s
or /s), ``seconds_per_time_unit``, ``summary`` and ``caution``.
"""

from __future__ import annotations

from crn.core.units import format_concentration, format_time
from crn.dna.budget import FuelBudget, Inventory
from crn.dna.implementation import ROLES, Implementation
from crn.io.contract import network_to_dict

__all__ = ["implementation_to_dict", "implementation_to_text", "summary_line", "CAUTION"]

CAUTION = ("DNA-implementation numbers are model predictions (mass-action kinetics of an "
           "idealised domain-level design): validate them with your lab's own controls and "
           "follow its safety practice.")

_CITATION = {
    "ssw": "three-domain fuel construction of Soloveichik, Seelig & Winfree, PNAS "
           "107(12):5393-5398, 2010",
    "two-domain": "two-domain join-fork construction of Cardelli, Math. Struct. Comp. Sci. "
                  "23(2), 2013",
}


def _unit(order: int) -> str:
    return "/M/s" if order == 2 else "/s"


def summary_line(impl: Implementation, budget: FuelBudget, inv: Inventory) -> str:
    """One line: DNA per formal reaction, total fuel, fuel a decision consumes vs supplied."""
    worst, frac = budget.worst
    when = ("a decision (mean field)" if budget.decided else
            "the run to the horizon (the mean field reaches no consensus)")
    count = len(inv.per_reaction)
    text = (f"summary: {count} formal reaction{'' if count == 1 else 's'}, "
            f"{inv.mean_complexes:g} fuel "
            f"complexes and {inv.mean_strands:g} strands per reaction"
            f" (+{inv.buffer_complexes} complexes for buffering); total fuel "
            f"{format_concentration(budget.total_supplied)}; {when} consumes "
            f"{format_concentration(budget.total_consumed)} "
            f"({budget.total_firings:.4g} formal firings x fuel per firing) of "
            f"{format_concentration(budget.total_supplied)} supplied")
    if worst is not None:
        text += f"; the most used, {worst}, {100 * frac:.3g}% of its supply"
    if frac >= 1:
        text += " - the fuel runs out before the decision"
    return text


def implementation_to_dict(impl: Implementation, budget: FuelBudget | None = None,
                           inv: Inventory | None = None) -> dict:
    """The JSON object of an implementation (see the module notes).

    Parameters
    ----------
    impl : Implementation
    budget : FuelBudget, optional
    inv : Inventory, optional
        When both are given, ``summary`` holds their numbers.

    Returns
    -------
    dict
    """
    out = network_to_dict(impl.network)
    out["scheme"] = impl.scheme
    out["roles"] = dict(impl.roles)
    out["fuel"] = {s: float(c) for s, c in impl.fuel.items()}
    out["formal"] = network_to_dict(impl.formal)
    out["parameters"] = impl.params.as_dict()
    out["seconds_per_time_unit"] = impl.params.seconds_per_time_unit
    out["lab_rates"] = [{"rate": float(q), "unit": _unit(r.order)}
                        for r, q in zip(impl.network.reactions(), impl.physical_rates,
                                        strict=True)]
    out["leak_reactions"] = list(impl.leak_reactions)
    if budget is not None and inv is not None:
        worst, frac = budget.worst
        out["summary"] = {
            "formal_reactions": len(inv.per_reaction),
            "complexes_per_reaction": inv.mean_complexes,
            "strands_per_reaction": inv.mean_strands,
            "buffer_complexes": inv.buffer_complexes,
            "total_fuel_molar": budget.total_supplied,
            "decision_time": budget.time,
            "decided": budget.decided,
            "expected_firings": budget.total_firings,
            "decision_fuel_molar": budget.total_consumed,
            "most_used_fuel": worst,
            "most_used_fraction": frac,
        }
    out["caution"] = CAUTION
    return out


def implementation_to_text(impl: Implementation, budget: FuelBudget | None = None,
                           inv: Inventory | None = None) -> str:
    """The implementation grouped by role, reactions by formal reaction, rates in lab units.

    Parameters
    ----------
    impl : Implementation
    budget : FuelBudget, optional
    inv : Inventory, optional
        When both are given, the summary line is added.

    Returns
    -------
    str
        Ends with a newline.
    """
    p = impl.params
    net = impl.network
    lines = [f"# {impl.formal.name}: {_CITATION.get(impl.scheme, impl.scheme)}",
             f"# one unit of formal rate = {p.rate:.3g} /M/s; signals "
             f"{format_concentration(p.concentration)} in total; fuel "
             f"{format_concentration(p.fuel_molar)} each; fastest displacement "
             f"{p.q_max:.3g} /M/s" + (f" (toehold {p.toehold} nt)" if p.toehold is not None else "")
             + f"; leak {p.leak:.3g} /M/s",
             f"# one unit of formal time = {format_time(p.seconds_per_time_unit)}; "
             f"{impl.molecules_per_molar:.4g} molecules per M in the formal volume"]
    for role in ROLES:
        names = [s for s in net.species if impl.roles[s] == role]
        if not names:
            continue
        if role == "fuel":
            items = [f"{s} {format_concentration(impl.fuel[s])}" for s in names]
        elif role == "signal":
            items = [f"{s} ({int(net.initial[net.index[s]])})" for s in names]
        else:
            items = names
        lines.append(f"{role} ({len(names)}): " + ", ".join(items))
    reactions = net.reactions()
    width = max((len(str(r)) for r in reactions), default=0)
    formal = impl.formal.reactions()
    placed = set()

    def show(j):
        r = reactions[j]
        lines.append(f"  {str(r):<{width}}   {impl.physical_rates[j]:.4g} {_unit(r.order)}"
                     + ("   (leak)" if j in impl.leak_reactions else ""))
        placed.add(j)

    for module in impl.modules:
        own = set(module.species)
        if module.formal is not None:
            fr = formal[module.formal]
            lines.append(f"formal reaction {module.formal + 1}: {fr}   rate {fr.rate:g}")
        else:
            lines.append(f"buffering of {module.buffers}:")
        for j, r in enumerate(reactions):
            if j not in placed and own & (set(r.reactants) | set(r.products)):
                show(j)
    for j in range(len(reactions)):
        if j not in placed:
            show(j)
    if budget is not None and inv is not None:
        lines.append(summary_line(impl, budget, inv))
    lines.append(f"caution: {CAUTION}")
    return "\n".join(lines) + "\n"
