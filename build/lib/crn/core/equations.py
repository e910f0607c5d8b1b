"""The mean-field ODE of a network as sympy expressions, and its text and LaTeX forms."""

from __future__ import annotations

import numpy as np
import sympy

from crn.core.network import Network

__all__ = [
    "exact_number",
    "species_symbols",
    "mean_field_equations",
    "conservation_laws",
    "format_equations",
]


def exact_number(x) -> sympy.Rational:
    """The rational a float prints as: ``0.1 -> 1/10``, ``2.0 -> 2`` (exact in its decimal form)."""
    return sympy.Rational(repr(float(x)))


def species_symbols(net: Network) -> tuple[sympy.Symbol, ...]:
    """One real sympy symbol per species, named after it, in species order."""
    return tuple(sympy.Symbol(s, real=True) for s in net.species)


def mean_field_equations(net: Network) -> dict[str, sympy.Expr]:
    """The right-hand side of the mean-field ODE, one sympy expression per species.

    ``d y_s / dt = sum_R k_R nu_sR prod_q y_q**r_qR`` with rate constants as
    exact rationals; ``y`` are fractions for a protocol network (limit
    n -> infinity) and concentrations otherwise.

    Parameters
    ----------
    net : Network

    Returns
    -------
    dict of str to sympy.Expr
        Species name -> expanded right-hand side, in species order.

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> net = load_model("models/epidemic.toml").network
    >>> mean_field_equations(net)
    {'I': 2*I*S, 'S': -2*I*S}
    """
    symbols = species_symbols(net)
    terms: list[list] = [[] for _ in net.species]
    stoich = net.stoichiometry.tocsc()
    for r in range(net.n_reactions):
        monomial = exact_number(net.rates[r])
        for s, m in zip(net.reactant_species[r], net.reactant_counts[r], strict=True):
            if s >= 0:
                monomial *= symbols[s] ** int(m)
        lo, hi = stoich.indptr[r], stoich.indptr[r + 1]
        for s, change in zip(stoich.indices[lo:hi], stoich.data[lo:hi], strict=True):
            terms[s].append(int(change) * monomial)
    return {name: sympy.expand(sympy.Add(*parts)) for name, parts in zip(net.species, terms,
                                                                          strict=True)}


def conservation_laws(net: Network) -> list[dict[str, sympy.Rational]]:
    """Exact basis of the linear conservation laws: ``w`` with ``w^T N = 0`` for stoichiometry N.

    Parameters
    ----------
    net : Network

    Returns
    -------
    list of dict of str to sympy.Rational
        One law per basis vector of the left null space, species name ->
        coefficient (zeros left out), scaled to whole numbers.
    """
    dense = np.rint(net.stoichiometry.toarray()).astype(np.int64)
    matrix = sympy.Matrix(dense.tolist()) if dense.size else sympy.zeros(net.n_species, 0)
    basis = (matrix.T.nullspace() if net.n_reactions
             else sympy.eye(net.n_species).columnspace())
    # Prefer the total count (every protocol conserves it) as the first law.
    ones = sympy.ones(net.n_species, 1)
    candidates = ([ones] if net.n_species and not any(ones.T * matrix) else []) + basis
    chosen: list = []
    for vector in candidates:
        if len(chosen) == len(basis):
            break
        if sympy.Matrix.hstack(*chosen, vector).rank() > len(chosen):
            chosen.append(vector)
    laws = []
    for vector in chosen:
        vector = vector * sympy.ilcm(1, *[sympy.fraction(v)[1] for v in vector])
        content = sympy.igcd(0, *[int(v) for v in vector if v != 0])
        sign = -1 if next(v for v in vector if v != 0) < 0 else 1
        laws.append({s: sympy.Integer(sign * v / content) for s, v in zip(net.species, vector,
                                                                         strict=True) if v != 0})
    return laws


def _readable(expr: sympy.Expr) -> sympy.Expr:
    """The factored form when it splits into two or more non-constant factors, else ``expr``."""
    if not isinstance(expr, sympy.Add) or len(expr.args) > 64:
        return expr
    factored = sympy.factor(expr)
    factors = sympy.Mul.make_args(factored)
    return factored if sum(not f.is_number for f in factors) >= 2 else expr


def format_equations(net: Network, *, latex: bool = False) -> str:
    """The mean-field ODE as readable text or as a LaTeX ``align*`` block.

    Each right-hand side is factored when that is shorter. The linear
    conservation laws follow, with their value at the initial state.

    Parameters
    ----------
    net : Network
    latex : bool, default False

    Returns
    -------
    str
        Ends with a newline.
    """
    from crn.solvers.ode import molecules_per_unit

    unit = ("fractions of the population (n -> infinity), time in parallel time"
            if net.from_protocol else f"concentrations (molecules / {net.volume:g})")
    symbols = dict(zip(net.species, species_symbols(net), strict=True))
    scale = exact_number(molecules_per_unit(net))
    rhs = {}
    for name, expr in mean_field_equations(net).items():
        rhs[name] = _readable(expr)
    laws = conservation_laws(net) if net.n_species <= 60 else []
    law_values = []
    for law in laws:
        expr = sympy.Add(*[c * symbols[s] for s, c in law.items()])
        total = sum(c * int(net.initial[net.index[s]]) for s, c in law.items()) / scale
        law_values.append((expr, total))
    if latex:
        lines = [f"% mean-field ODE of {net.name}: {unit}", r"\begin{align*}"]
        body = [rf"\frac{{d{sympy.latex(symbols[s])}}}{{dt}} &= {sympy.latex(e)}"
                for s, e in rhs.items()]
        body += [rf"{sympy.latex(expr)} &= {sympy.latex(value)}" for expr, value in law_values]
        lines.append(" \\\\\n".join(body))
        lines.append(r"\end{align*}")
        return "\n".join(lines) + "\n"
    width = max((len(s) for s in net.species), default=0)
    lines = [f"Mean-field ODE of {net.name}, in {unit}:"]
    lines += [f"  d{s}/dt{' ' * (width - len(s))} = {sympy.sstr(e)}" for s, e in rhs.items()]
    if law_values:
        lines.append("Conserved:")
        lines += [f"  {sympy.sstr(expr)} = {value}" for expr, value in law_values]
    return "\n".join(lines) + "\n"
