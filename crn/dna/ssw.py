"""The three-domain fuel construction of Soloveichik, Seelig and Winfree (2010).

Soloveichik, Seelig & Winfree, "DNA as a universal substrate for chemical
kinetics", PNAS 107(12):5393-5398, 2010. Every formal species is a signal
strand; every formal reaction gets its own gates, all supplied at C_max (the
fuel concentration):

* unimolecular ``X -> P`` (rate k, /s in lab units)::

      X + G   -> O + W      q = k / C_max
      O + T   -> P + W'     q_max           (no translator when P is empty)

* bimolecular ``X1 + X2 -> P`` (rate k, /M/s)::

      X1 + L <-> H + B      q = k forward, q_max back (B: buffer strand at C_max)
      X2 + H  -> O + W      q_max
      O + T   -> P + W'     q_max

  With L, B at C_max >> signals, H sits at (q / q_max) X1 and the output O is
  made at ``q X1 X2 L / (B + X2)``, which tends to ``k X1 X2``.

* buffering: X1 spends a fraction ``q / q_max`` of its time in H. So that every
  formal species is sequestered alike, each species X with total first-step
  rate s_X below the largest, lambda, gets ``X + LS <-> HS + BS`` with forward
  rate ``lambda - s_X`` and back rate q_max (split into several modules when
  that exceeds q_max).

The reference (journal, volume, issue, pages) and the paper's claim that such
cascades closely approximate the dynamics of arbitrary systems of coupled
chemical reactions are checked against the paper's abstract page (pnas.org,
107/12/5393). The gate structure, the rates (q = k for a bimolecular reaction,
k / C_max for a unimolecular one, q_max for every other step) and the buffering
rule ``lambda - s_X`` are still quoted from memory of the paper's construction
(its Fig. 1 and the section on buffering): no copy of the paper's body could
be consulted. The strand names and the leak reaction are ours. The first
reactant of each bimolecular reaction is a free choice of the construction;
here it is chosen greedily (reactions in order, the reactant with the smaller
first-step total so far) to keep lambda small.

Leak (``DnaParameters.leak`` > 0): the first gate and the translator of each
reaction react directly, ``L + T -> P + B + WL`` (``G + T -> P + WL`` for a
unimolecular reaction), releasing the outputs without the inputs. A reaction
without products has no translator and no leak.

Strands (domain level, each conserved by every reaction): a signal strand per
formal species (``X_strand``; the history domain a gate writes on a released
strand does not change its reactions and is not told apart), and per reaction
i the gate bottom strand, the buffer top strand (bimolecular), the output top
strand and the translator bottom strand.
"""

from __future__ import annotations

from crn.core.network import Network, Reaction
from crn.dna.implementation import (
    Builder,
    Implementation,
    Module,
    add_strands,
    implement_each,
    signal_strands,
)
from crn.dna.parameters import DnaParameters

__all__ = ["implement_ssw"]


def implement_ssw(formal: Network, params: DnaParameters) -> Implementation:
    """Implement ``formal`` with the 2010 three-domain construction.

    Parameters
    ----------
    formal : Network
        Reactions with one or two reactants.
    params : DnaParameters

    Returns
    -------
    Implementation

    Raises
    ------
    CRNError
        For a formal reaction with no or more than two reactants.
    DnaParameterError
        When a reaction needs a displacement rate above q_max at these parameters.

    References
    ----------
    Soloveichik, Seelig & Winfree, PNAS 107(12):5393-5398, 2010.
    """
    return implement_each(formal, params, "ssw", _module)


def _module(b: Builder, i: int, r: Reaction, load: dict[str, float]) -> None:
    """The gates, intermediates and wastes of formal reaction i (and its leak)."""
    p = b.params
    q_max, c_max = p.q_max, p.fuel_molar
    tag = f"r{i + 1}"
    out_top = f"{tag}_out_top"
    bottom = f"{tag}_gate_bottom"
    fuel_used = {}
    if r.order == 1:
        (x,) = r.reactants
        q = r.rate * p.rate * p.concentration / c_max  # /s -> /M/s at C_max
        b.check_displacement(q, f"formal reaction {i + 1} ({r})")
        gate = b.add(f"G_{tag}", "fuel", {bottom: 1, out_top: 1})
        used = b.add(f"W_{tag}", "waste", {bottom: 1, f"{x}_strand": 1})
        first_gate, first_extra = gate, {}
    else:
        x1, x2, q = b.first_step(i, r, load)
        buffer_top = f"{tag}_buffer_top"
        gate = b.add(f"L_{tag}", "fuel", {bottom: 1, buffer_top: 1, out_top: 1})
        buffer = b.add(f"B_{tag}", "fuel", {buffer_top: 1})
        held = b.add(f"H_{tag}", "intermediate", {bottom: 1, f"{x1}_strand": 1, out_top: 1})
        used = b.add(f"W_{tag}", "waste",
                     add_strands({bottom: 1}, signal_strands(r.reactants)))
        first_gate, first_extra = gate, {buffer: 1}
    has_products = bool(r.products)
    out = b.add(f"O_{tag}", "intermediate" if has_products else "waste", {out_top: 1})
    if r.order == 1:
        b.react({x: 1, gate: 1}, {out: 1, used: 1}, q)
    else:
        b.bind(x1, gate, held, buffer, q)
        b.react({x2: 1, held: 1}, {out: 1, used: 1}, q_max)
    fuel_used[gate] = 1
    module = [gate, used, out] + ([buffer, held] if r.order == 2 else [])
    if has_products:
        t_bottom = f"{tag}_translator_bottom"
        translator = b.add(f"T_{tag}", "fuel",
                           add_strands({t_bottom: 1}, signal_strands(r.products)))
        spent = b.add(f"WT_{tag}", "waste", {t_bottom: 1, out_top: 1})
        b.react({out: 1, translator: 1}, add_strands(r.products, {spent: 1}), q_max)
        fuel_used[translator] = 1
        module += [translator, spent]
        if p.leak > 0:
            leaked = b.add(f"WL_{tag}", "waste",
                           {bottom: 1, out_top: 1, t_bottom: 1})
            b.react({first_gate: 1, translator: 1},
                    add_strands(r.products, first_extra, {leaked: 1}), p.leak, leak=True)
            module.append(leaked)
    b.modules.append(Module(formal=i, buffers=None, species=tuple(module),
                            fuel_per_firing=fuel_used))
