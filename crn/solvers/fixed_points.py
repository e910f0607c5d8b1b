"""Fixed points of the mean-field ODE on the conserved simplex, and their stability.

The mean field moves inside the *compatibility class* of its initial state:
the points ``y >= 0`` with ``W y = W y0``, where the rows of ``W`` span the
left null space of the stoichiometry (the linear conservation laws; for a
protocol this includes ``sum y = 1``, the simplex). Fixed points are found on
that class, exactly with sympy for small networks and by Newton-type root
finding from many starting points otherwise. Stability comes from the
eigenvalues of the Jacobian restricted to the directions the conservation
laws allow (the stoichiometric subspace).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import scipy.linalg as la

from crn.core.network import Network
from crn.core.outcome import label_name, mean_field_consensus_index
from crn.solvers.ode import initial_state, mean_field_system, molecules_per_unit

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

__all__ = [
    "FixedPoint",
    "find_fixed_points",
    "restricted_eigenvalues",
    "classify",
    "conservation_basis",
    "EXACT_MAX_SPECIES",
    "CLASSIFICATIONS",
]

#: Networks with at most this many species get exact (sympy) fixed points under ``method="auto"``.
EXACT_MAX_SPECIES = 10
#: Possible values of :attr:`FixedPoint.classification`.
CLASSIFICATIONS = ("stable", "unstable", "saddle", "non-hyperbolic", "non-isolated")


@dataclass(frozen=True)
class FixedPoint:
    """One fixed point of the mean field on the compatibility class of the initial state.

    Attributes
    ----------
    point : ndarray of float64, shape (n_species,)
        Fractions (protocols) or concentrations; NaN for the free coordinates
        of a non-isolated family.
    classification : str
        ``"stable"`` (every restricted eigenvalue has negative real part),
        ``"unstable"`` (all positive), ``"saddle"`` (both signs),
        ``"non-hyperbolic"`` (some real part is zero: linearisation says
        nothing) or ``"non-isolated"`` (a continuum of fixed points).
    eigenvalues : ndarray of complex128, shape (dim,)
        Eigenvalues of the Jacobian restricted to the stoichiometric subspace
        (``dim`` its dimension), sorted by decreasing real part.
    unstable_directions : ndarray of float64, shape (k, n_species)
        Unit vectors in species space along the eigenvectors of the ``k``
        eigenvalues with positive real part (real parts of complex ones).
    consensus : str or None
        The label the point is a consensus on (no molecule reports another), or None.
    tie : bool
        Whether two labels lead with equal positive shares (the tie point of a
        majority protocol).
    exact : dict of str to str, optional
        Species name -> exact coordinate (sympy text), when found exactly.
    """

    point: np.ndarray
    classification: str
    eigenvalues: np.ndarray
    unstable_directions: np.ndarray
    consensus: str | None = None
    tie: bool = False
    exact: dict | None = field(default=None)

    @property
    def n_unstable(self) -> int:
        """Number of restricted eigenvalues with positive real part."""
        return int(self.unstable_directions.shape[0])


def conservation_basis(net: Network) -> tuple[np.ndarray, np.ndarray]:
    """Orthonormal bases of the conservation laws and of the stoichiometric subspace.

    Parameters
    ----------
    net : Network

    Returns
    -------
    laws : ndarray, shape (m, n_species)
        Orthonormal rows spanning the left null space of the stoichiometry.
    subspace : ndarray, shape (n_species, d)
        Orthonormal columns spanning the stoichiometric subspace, ``d = n_species - m``.
    """
    stoich = net.stoichiometry
    gram = (stoich @ stoich.T).toarray() if net.n_reactions else np.zeros((net.n_species,) * 2)
    values, vectors = la.eigh(gram)
    cutoff = 1e-10 * max(float(values.max(initial=0.0)), 1.0)
    null = values <= cutoff
    return vectors[:, null].T, vectors[:, ~null]


def classify(eigenvalues: ArrayLike, tol: float | None = None) -> str:
    """Stability class from restricted eigenvalues.

    Parameters
    ----------
    eigenvalues : array_like of complex, shape (dim,)
    tol : float, optional
        Real parts within ``tol`` of 0 count as zero; default
        ``1e-7 max(1, max |lambda|)``.

    Returns
    -------
    str
        ``"stable"``, ``"unstable"``, ``"saddle"`` or ``"non-hyperbolic"``
        (a zero-dimensional subspace counts as stable).
    """
    eigenvalues = np.asarray(eigenvalues, dtype=np.complex128)
    if tol is None:
        tol = 1e-7 * max(1.0, float(np.abs(eigenvalues).max(initial=0.0)))
    real = eigenvalues.real
    if (np.abs(real) <= tol).any():
        return "non-hyperbolic"
    if (real < 0).all():
        return "stable"
    if (real > 0).all():
        return "unstable"
    return "saddle"


def restricted_eigenvalues(net: Network, point: ArrayLike, subspace: np.ndarray | None = None
                           ) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues and eigenvectors of the Jacobian restricted to the stoichiometric subspace.

    The field ``f`` takes values in the stoichiometric subspace (spanned by
    the orthonormal columns Q), so ``Q^T J Q`` is exactly the Jacobian of the
    flow inside a compatibility class.

    Parameters
    ----------
    net : Network
    point : array_like of float, shape (n_species,)
    subspace : ndarray, shape (n_species, d), optional
        From :func:`conservation_basis`.

    Returns
    -------
    eigenvalues : ndarray of complex128, shape (d,)
        Sorted by decreasing real part.
    vectors : ndarray of complex128, shape (n_species, d)
        Matching eigenvectors in species coordinates (unit norm).
    """
    if subspace is None:
        subspace = conservation_basis(net)[1]
    jac = mean_field_system(net).jacobian(0.0, np.asarray(point, dtype=np.float64)).toarray()
    reduced = subspace.T @ jac @ subspace
    if reduced.size == 0:
        return np.zeros(0, np.complex128), np.zeros((net.n_species, 0), np.complex128)
    values, vectors = la.eig(reduced)
    order = np.argsort(-values.real, kind="stable")
    vectors = subspace @ vectors[:, order]
    return values[order], vectors / np.linalg.norm(vectors, axis=0, keepdims=True)


def _describe(net: Network, point, subspace, exact=None, family=False,
              exact_eigenvalues=None) -> FixedPoint:
    scale = molecules_per_unit(net)
    labels = np.asarray(net.species_label)
    n_labels = len(net.labels)
    # the searches keep only points >= 0 up to roundoff; clip that roundoff (-1e-17) to 0
    point = np.maximum(np.asarray(point, dtype=np.float64), 0.0) + 0.0  # + 0.0: no -0.0
    safe = np.nan_to_num(point)
    totals = np.bincount(labels[labels >= 0], weights=np.maximum(safe, 0)[labels >= 0],
                         minlength=n_labels)
    leading = np.sort(totals)[::-1]
    tie = bool(n_labels >= 2 and leading[0] > 1e-9 and abs(leading[0] - leading[1]) <= 1e-9)
    consensus = None
    if not family and n_labels:
        index = mean_field_consensus_index(labels, n_labels, safe, scale)
        consensus = label_name(net, index)
    if family:
        return FixedPoint(point=point, classification="non-isolated",
                          eigenvalues=np.zeros(0, np.complex128),
                          unstable_directions=np.zeros((0, net.n_species)),
                          consensus=None, tie=tie, exact=exact)
    values, vectors = restricted_eigenvalues(net, safe, subspace)
    tol = 1e-7 * max(1.0, float(np.abs(values).max(initial=0.0)))
    unstable = vectors[:, values.real > tol].real.T
    if exact_eigenvalues is not None:
        # Repeated eigenvalues of a defective Jacobian come out of LAPACK split by
        # ~sqrt(eps); the exact ones do not.
        values = exact_eigenvalues
    norms = np.linalg.norm(unstable, axis=1, keepdims=True)
    unstable = unstable / np.where(norms > 0, norms, 1.0)
    return FixedPoint(point=safe, classification=classify(values, tol), eigenvalues=values,
                      unstable_directions=unstable, consensus=consensus, tie=tie, exact=exact)


def _exact(net: Network):
    """Fixed points by sympy: eliminate the conserved combinations, solve the rest."""
    import sympy

    from crn.core.equations import (
        conservation_laws,
        exact_number,
        mean_field_equations,
        species_symbols,
    )

    symbols = species_symbols(net)
    equations = mean_field_equations(net)
    laws = conservation_laws(net)
    scale = exact_number(molecules_per_unit(net))
    constraints = []
    for law in laws:
        value = sum(c * int(net.initial[net.index[s]]) for s, c in law.items()) / scale
        constraints.append(sum(c * symbols[net.index[s]] for s, c in law.items()) - value)
    pivots = sympy.solve(constraints, symbols, dict=True) if constraints else [{}]
    if not pivots:
        return []
    substitution = pivots[0]
    free = [s for s in symbols if s not in substitution]
    field_free = [sympy.expand(equations[str(s)].subs(substitution)) for s in free]
    jacobian = sympy.Matrix(field_free).jacobian(free) if free else sympy.zeros(0, 0)
    reduced = [e for e in field_free if e != 0]
    if reduced:
        solutions = sympy.solve(reduced, free, dict=True)
    else:
        solutions = [{}]
    found = []
    for solution in solutions:
        full = {s: sympy.simplify(substitution.get(s, s).subs(solution)) for s in symbols}
        full = {s: sympy.simplify(v.subs(solution)) for s, v in full.items()}
        open_symbols = set().union(*(v.free_symbols for v in full.values()))
        numeric = []
        real = True
        for s in symbols:
            value = full[s]
            if value.free_symbols:
                numeric.append(np.nan)
                continue
            z = complex(sympy.N(value, 30))
            if abs(z.imag) > 1e-12:
                real = False
            numeric.append(z.real)
        if not real or any(v < -1e-12 for v in numeric if np.isfinite(v)):
            continue
        exact = {str(s): sympy.sstr(full[s]) for s in symbols}
        eigenvalues = None
        if not open_symbols and len(free) <= 6:
            at_point = jacobian.subs({s: full[s] for s in free})
            eigenvalues = np.array([complex(sympy.N(v, 30)) for v, m in
                                    at_point.eigenvals().items() for _ in range(m)],
                                   dtype=np.complex128)
            eigenvalues = eigenvalues[np.argsort(-eigenvalues.real, kind="stable")]
        found.append((np.array(numeric), exact, bool(open_symbols), eigenvalues))
    return found


def _numeric(net: Network, laws, subspace, starts: int, y0):
    """Fixed points by MINPACK's hybrid Powell method from quasi-random starting points."""
    from scipy.optimize import root
    from scipy.stats import qmc

    system = mean_field_system(net)
    target = laws @ y0
    n = net.n_species
    size = max(float(np.abs(y0).sum()), 1e-300)

    def equations(y):
        f = system.rhs(0.0, y)
        jac = system.jacobian(0.0, y).toarray()
        # f lies in the stoichiometric subspace, orthogonal to the laws: both parts vanish
        # exactly at a fixed point of the class.
        return (np.concatenate([subspace.T @ f, laws @ y - target]),
                np.vstack([subspace.T @ jac, laws]))

    guesses = [y0, np.full(n, size / n)]
    if starts > 2 and n > 0:
        sample = qmc.Halton(d=n, scramble=False).random(starts - 1)[1:]
        weights = -np.log(np.clip(sample, 1e-12, 1 - 1e-12))
        guesses += list(size * weights / weights.sum(axis=1, keepdims=True))
    found: list[np.ndarray] = []
    scale_f = max(1.0, float(np.abs(system.matrix.data).max(initial=0.0))) * max(size, 1.0) ** 2
    for guess in guesses:
        guess = guess + laws.T @ (target - laws @ guess)
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            sol = root(equations, guess, jac=True, method="hybr", options={"xtol": 1e-13})
        y = sol.x
        if not np.isfinite(y).all() or (y < -1e-8 * size).any():
            continue
        if np.abs(system.rhs(0.0, y)).max() > 1e-9 * scale_f or \
                np.abs(laws @ y - target).max(initial=0.0) > 1e-9 * size:
            continue
        y = np.where(np.abs(y) <= 1e-12 * size, 0.0, y)
        if all(np.abs(y - other).max() > 1e-6 * size for other in found):
            found.append(y)
    return found


def find_fixed_points(net: Network, *, method: str = "auto", starts: int | None = None
                      ) -> list[FixedPoint]:
    """Fixed points of the mean field on the compatibility class of the initial state.

    Parameters
    ----------
    net : Network
        Its initial state fixes the class (for a protocol: the simplex, plus
        any further conservation law such as ``A - B`` of exact majority).
    method : {"auto", "exact", "numeric"}
        ``"exact"`` solves the polynomial system with sympy (exact
        coordinates, and continua of fixed points reported as
        ``"non-isolated"``); ``"numeric"`` runs a hybrid Powell root finder from
        ``starts`` deterministic quasi-random points of the class and keeps the
        distinct non-negative roots; ``"auto"`` is exact up to
        :data:`EXACT_MAX_SPECIES` species.
    starts : int, optional
        Starting points of the numeric search; default 64 up to 100 species, 16 above.

    Returns
    -------
    list of FixedPoint
        Sorted: consensus points first (by label), then by decreasing number
        of unstable directions.

    Raises
    ------
    ValueError
        For a bad ``method`` or ``starts``.

    References
    ----------
    Feinberg, "Foundations of Chemical Reaction Network Theory", Springer 2019
    (stoichiometric compatibility classes). Angluin, Aspnes, Eisenstat,
    Distributed Computing 21(2):87-102, 2008 (the tie point of approximate majority).

    Examples
    --------
    The four equilibria of approximate majority: the two consensus corners, the
    all-blank corner and the tie point.

    >>> from crn.io.models import load_model
    >>> net = load_model("models/approximate_majority.toml", {"n": 20, "gap": 4}).network
    >>> for point in find_fixed_points(net):
    ...     print(point.exact, point.classification)
    {'X': '1', 'Y': '0', 'B': '0'} stable
    {'X': '0', 'Y': '1', 'B': '0'} stable
    {'X': '0', 'Y': '0', 'B': '1'} unstable
    {'X': '1/3', 'Y': '1/3', 'B': '1/3'} saddle
    """
    if method not in ("auto", "exact", "numeric"):
        raise ValueError(f"`method` must be 'auto', 'exact' or 'numeric', got {method!r}")
    if starts is not None and (not isinstance(starts, int | np.integer) or starts < 1):
        raise ValueError(f"`starts` must be a positive integer, got {starts!r}")
    laws, subspace = conservation_basis(net)
    y0 = initial_state(net)
    points: list[FixedPoint] = []
    use_exact = method == "exact" or (method == "auto" and net.n_species <= EXACT_MAX_SPECIES)
    if use_exact:
        try:
            for numeric, exact, family, eigenvalues in _exact(net):
                points.append(_describe(net, numeric, subspace, exact, family, eigenvalues))
        except (NotImplementedError, ValueError) as err:
            if method == "exact":
                raise
            warnings.warn(f"exact fixed points failed ({err}); searching numerically",
                          stacklevel=2)
            use_exact = False
    if not use_exact:
        if starts is None:
            starts = 64 if net.n_species <= 100 else 16
        for y in _numeric(net, laws, subspace, int(starts), y0):
            points.append(_describe(net, y, subspace))

    def key(p: FixedPoint):
        point = tuple(np.nan_to_num(p.point))
        return (p.consensus is None, p.consensus or "", -p.n_unstable, point)

    return sorted(points, key=key)
