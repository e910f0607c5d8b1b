"""The two-domain construction of Cardelli (2013): join and fork gates of nicked double strands.

Cardelli, "Two-domain DNA strand displacement", Mathematical Structures in
Computer Science 23(2):247-271, 2013 (journal volume and pages from memory);
first version EPTCS 26:47-61, 2010, doi:10.4204/EPTCS.26.5 (checked against
the DOAJ record of the proceedings). Signals are two-domain strands ``<t x>``
(one toehold domain and one recognition domain naming the species); gates are
double strands nicked in the top strand, and the paper's signal-processing
gates are forks and joins (these three points checked against the paper's
abstract); helper strands drive each gate to completion. A bimolecular
reaction with one or two products, ``X1 + X2 -> Y1 (+ Y2)`` (rate k, /M/s), is a
join gate followed by a fork gate::

    X1 + J   <-> J1 + R1     q = k forward, q_max back (R1 = <x1 t>)
    X2 + J1  <-> J2 + R2     q_max both ways          (R2 = <x2 t>)
    J2 + HJ   -> J3 + A      q_max                    (HJ helper <t a>, A = <a t>)
    A  + F   <-> F1 + Y1     q_max both ways
    F1 + HF   -> F2 + Y2     q_max                    (HF helper; a spare strand
                                                        for a one-product reaction)

The steps inside the join and the fork, their helper strands and the
reversibility of each step are quoted from memory of the paper's figures.
Released strands that the two-domain paper leaves to accumulate are here
supplied like every fuel for the first step: R1 starts at C_max, so the first
step is buffered as in the 2010 construction (Soloveichik, Seelig & Winfree,
PNAS 107:5393) and J1 sits at (q / q_max) X1; the same
buffering modules then make every species' sequestration equal. With J, R1,
HJ, F and HF at C_max the output is made at ``q X1 X2 J / (R1 + X2)`` -> ``k X1 X2``.

Not implemented (a clear error names the reaction): unimolecular reactions
(the paper's transducer gate is not built here), reactions without products and
reactions with more than two products.

Leak (``DnaParameters.leak`` > 0): the fork's helper releases both outputs
without the input, ``F + HF -> Y1 (+ Y2) + WL``.

Strands conserved by every reaction: a signal strand per formal species and,
per reaction, the join and fork bottom strands, the two released top strands
``<x1 t>``, ``<x2 t>``, the join output ``<a t>``, the two helpers and the spare.
"""

from __future__ import annotations

from crn.core.errors import CRNError
from crn.core.network import Network, Reaction
from crn.dna.implementation import Builder, Implementation, Module, add_strands, implement_each
from crn.dna.parameters import DnaParameters

__all__ = ["implement_two_domain"]


def implement_two_domain(formal: Network, params: DnaParameters) -> Implementation:
    """Implement ``formal`` with two-domain join and fork gates.

    Parameters
    ----------
    formal : Network
        Bimolecular reactions with one or two products.
    params : DnaParameters

    Returns
    -------
    Implementation

    Raises
    ------
    CRNError
        Naming the first formal reaction the scheme cannot implement.
    DnaParameterError
        When a reaction needs a displacement rate above q_max.

    References
    ----------
    Cardelli, Math. Struct. Comp. Sci. 23(2):247-271, 2013.
    """
    return implement_each(formal, params, "two-domain", _join_fork, check=_check)


def _check(i: int, r: Reaction) -> None:
    """Raise for a formal reaction the scheme cannot build."""
    n_products = sum(r.products.values())
    if r.order != 2 or not 1 <= n_products <= 2:
        raise CRNError(
            f"formal reaction {i + 1} ({r}) cannot be implemented by the two-domain "
            f"scheme, which builds bimolecular reactions with one or two products; use "
            f"--scheme ssw")


def _join_fork(b: Builder, i: int, r: Reaction, load: dict[str, float]) -> None:
    """The join and fork gates of formal reaction i (and its leak)."""
    p = b.params
    q_max = p.q_max
    tag = f"r{i + 1}"
    x1, x2, k = b.first_step(i, r, load)
    products = [s for s, m in r.products.items() for _ in range(m)]
    y1 = products[0]
    y2 = products[1] if len(products) > 1 else None
    j_bot, f_bot = f"{tag}_join_bottom", f"{tag}_fork_bottom"
    s_r1, s_r2, s_a = f"{tag}_x1t", f"{tag}_x2t", f"{tag}_at"
    s_hj, s_hf = f"{tag}_join_helper", f"{tag}_fork_helper"
    s_y2 = f"{y2}_strand" if y2 is not None else f"{tag}_spare"
    join = b.add(f"J_{tag}", "fuel", {j_bot: 1, s_r1: 1, s_r2: 1, s_a: 1})
    r1 = b.add(f"R1_{tag}", "fuel", {s_r1: 1})
    j1 = b.add(f"J1_{tag}", "intermediate", {j_bot: 1, f"{x1}_strand": 1, s_r2: 1, s_a: 1})
    r2 = b.add(f"R2_{tag}", "intermediate", {s_r2: 1})
    j2 = b.add(f"J2_{tag}", "intermediate",
               add_strands({j_bot: 1, s_a: 1}, {f"{x1}_strand": 1}, {f"{x2}_strand": 1}))
    hj = b.add(f"HJ_{tag}", "fuel", {s_hj: 1})
    j3 = b.add(f"J3_{tag}", "waste",
               add_strands({j_bot: 1, s_hj: 1}, {f"{x1}_strand": 1}, {f"{x2}_strand": 1}))
    a = b.add(f"A_{tag}", "intermediate", {s_a: 1})
    fork = b.add(f"F_{tag}", "fuel", add_strands({f_bot: 1, s_y2: 1}, {f"{y1}_strand": 1}))
    f1 = b.add(f"F1_{tag}", "intermediate", {f_bot: 1, s_a: 1, s_y2: 1})
    hf = b.add(f"HF_{tag}", "fuel", {s_hf: 1})
    f2 = b.add(f"F2_{tag}", "waste", {f_bot: 1, s_a: 1, s_hf: 1})
    module = [join, r1, j1, r2, j2, hj, j3, a, fork, f1, hf, f2]
    b.bind(x1, join, j1, r1, k)
    b.react({x2: 1, j1: 1}, {j2: 1, r2: 1}, q_max)
    b.react({j2: 1, r2: 1}, {x2: 1, j1: 1}, q_max)
    b.react({j2: 1, hj: 1}, {j3: 1, a: 1}, q_max)
    b.react({a: 1, fork: 1}, {f1: 1, y1: 1}, q_max)
    b.react({f1: 1, y1: 1}, {a: 1, fork: 1}, q_max)
    if y2 is not None:
        b.react({f1: 1, hf: 1}, add_strands({f2: 1}, {y2: 1}), q_max)
    else:
        spare = b.add(f"S_{tag}", "waste", {s_y2: 1})
        b.react({f1: 1, hf: 1}, {f2: 1, spare: 1}, q_max)
        module.append(spare)
    if p.leak > 0:
        leaked = b.add(f"WL_{tag}", "waste", {f_bot: 1, s_hf: 1})
        out = add_strands({y1: 1}, {y2: 1} if y2 is not None else {}, {leaked: 1})
        if y2 is None:
            out = add_strands(out, {spare: 1})
        b.react({fork: 1, hf: 1}, out, p.leak, leak=True)
        module.append(leaked)
    b.modules.append(Module(formal=i, buffers=None, species=tuple(module),
                            fuel_per_firing={join: 1, hj: 1, fork: 1, hf: 1}))
