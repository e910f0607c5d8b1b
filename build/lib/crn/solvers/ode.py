"""The deterministic mean-field ODE of a network: right-hand side, sparse Jacobian, solver.

For a network translated from a protocol the state is the vector of fractions
``y = x / n`` in the limit n -> infinity; for any other network it is the
vector of concentrations ``c = x / volume``. Both obey the same mass-action law
``d/dt y = sum_R k_R nu_R prod_s y_s**r_sR`` (docs/design.md, Semantics).

The law is evaluated in complex form: reactions that share a reactant
multiset (a *complex*) share one monomial ``psi_c(y) = prod_s y_s**r_sc``, so
``f(y) = M psi(y)`` with a sparse ``M`` (species x complexes) holding the
rate-weighted net changes. Each monomial is a product of ``order`` gathered
entries, so the right-hand side is a few vector gathers and one sparse
matrix-vector product, and the Jacobian ``M dpsi/dy`` is one weighted
``bincount`` into a precomputed sparsity pattern.
"""

from __future__ import annotations

import math
import weakref
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.integrate import solve_ivp

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.core.outcome import RunOutcome, mean_field_consensus_index

__all__ = [
    "MeanFieldResult",
    "MeanFieldSystem",
    "mean_field_system",
    "mean_field_rhs",
    "mean_field_jacobian",
    "molecules_per_unit",
    "initial_state",
    "default_horizon",
    "solve_mean_field",
    "METHODS",
]

#: Methods of :func:`scipy.integrate.solve_ivp` accepted by :func:`solve_mean_field`.
METHODS = ("LSODA", "BDF", "Radau", "RK45", "DOP853")
_IMPLICIT = ("LSODA", "BDF", "Radau")
#: The consensus event fires this far below one molecule: the root finder places
#: an event on either side of its threshold by a rounding error, and the strict
#: "fewer than one" test must hold at the event.
_EVENT_SLACK = 1e-9


class MeanFieldSystem:
    """The compiled mean-field law ``f(y) = M psi(y)`` of one network.

    Build with :func:`mean_field_system` (cached per network). Instances are
    read-only after construction and safe to share between threads.

    Attributes
    ----------
    n_species : int
    complexes : ndarray of intp, shape (n_complexes, width)
        Reactant molecules of each distinct reactant complex, one column per
        molecule (``2 A`` fills two columns with A), padded with
        ``n_species`` (a slot that always holds 1).
    matrix : scipy.sparse.csr_matrix, shape (n_species, n_complexes)
        ``M[s, c] = sum over reactions R with reactant complex c of k_R nu_sR``.
    """

    def __init__(self, net: Network):
        n = net.n_species
        self.n_species = n
        rows, cols = np.nonzero(net.reactant_species >= 0)
        counts = net.reactant_counts[rows, cols]
        molecule_reaction = np.repeat(rows, counts)
        molecule_species = np.repeat(net.reactant_species[rows, cols], counts)
        orders = np.asarray(net.orders, dtype=np.intp)
        width = max(int(orders.max(initial=0)), 1)
        starts = np.concatenate([[0], np.cumsum(orders)[:-1]]).astype(np.intp)
        molecules = np.full((net.n_reactions, width), n, dtype=np.intp)
        if molecule_reaction.size:
            slot = np.arange(molecule_reaction.size) - starts[molecule_reaction]
            molecules[molecule_reaction, slot] = molecule_species
        if net.n_reactions:
            complexes, which = np.unique(molecules, axis=0, return_inverse=True)
            which = np.asarray(which).reshape(-1)
        else:
            complexes, which = molecules, np.zeros(0, dtype=np.intp)
        grouping = sp.csr_matrix(
            (np.ones(net.n_reactions), (np.arange(net.n_reactions), which)),
            shape=(net.n_reactions, complexes.shape[0]),
        )
        weighted = net.stoichiometry.multiply(np.asarray(net.rates)[None, :]).tocsr()
        matrix = (weighted @ grouping).tocsr()
        matrix.eliminate_zeros()
        matrix.sort_indices()
        self.complexes = complexes
        self.matrix = matrix
        self._columns = [np.ascontiguousarray(complexes[:, j]) for j in range(width)]
        self._jacobian_pattern(width)

    def _jacobian_pattern(self, width: int) -> None:
        """Precompute where each term ``M[i, c] dpsi_c/dy_s`` lands in the CSR Jacobian."""
        n = self.n_species
        coo = self.matrix.tocoo()
        term_row, term_col, term_val = [], [], []
        others = []
        for j in range(width):
            species = self._columns[j][coo.col]
            keep = species < n
            term_row.append(coo.row[keep])
            term_col.append(species[keep])
            term_val.append(coo.data[keep])
            rest = [self._columns[i][coo.col[keep]] for i in range(width) if i != j]
            others.append(np.stack(rest, axis=1) if rest else np.zeros((keep.sum(), 0), np.intp))
        row = np.concatenate(term_row) if term_row else np.zeros(0, np.intp)
        col = np.concatenate(term_col) if term_col else np.zeros(0, np.intp)
        self._term_value = np.concatenate(term_val) if term_val else np.zeros(0)
        other = np.concatenate(others, axis=0) if others else np.zeros((0, 0), np.intp)
        self._term_others = [np.ascontiguousarray(other[:, k]) for k in range(other.shape[1])]
        key = row.astype(np.int64) * n + col
        unique, position = np.unique(key, return_inverse=True)
        self._term_position = np.asarray(position).reshape(-1)
        self._nnz = unique.size
        pattern_row = unique // max(n, 1)
        self._indices = (unique % max(n, 1)).astype(np.int32)
        self._indptr = np.searchsorted(pattern_row, np.arange(n + 1)).astype(np.int32)

    def _extended(self, y) -> np.ndarray:
        ext = np.empty(self.n_species + 1)
        ext[: self.n_species] = y
        ext[self.n_species] = 1.0
        return ext

    def monomials(self, y) -> np.ndarray:
        """``psi_c(y) = prod_s y_s**r_sc`` for every complex, shape (n_complexes,)."""
        ext = self._extended(y)
        out = np.take(ext, self._columns[0])
        for column in self._columns[1:]:
            out *= np.take(ext, column)
        return out

    def rhs(self, t, y) -> np.ndarray:
        """``f(y)``, shape (n_species,); ``t`` is ignored (autonomous law)."""
        return self.matrix @ self.monomials(y)

    def jacobian(self, t, y) -> sp.csr_matrix:
        """``df/dy`` as a CSR matrix, shape (n_species, n_species); ``t`` is ignored."""
        ext = self._extended(y)
        weights = self._term_value.copy()
        for column in self._term_others:
            weights *= np.take(ext, column)
        data = np.bincount(self._term_position, weights=weights, minlength=self._nnz)
        return sp.csr_matrix((data, self._indices, self._indptr),
                             shape=(self.n_species, self.n_species))


_SYSTEMS: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def _check_network(net) -> None:
    if not isinstance(net, Network):
        raise TypeError(f"`net` must be a crn.core.network.Network, got {type(net).__name__}")


def mean_field_system(net: Network) -> MeanFieldSystem:
    """The compiled mean-field law of ``net`` (built once per network object).

    Parameters
    ----------
    net : Network

    Returns
    -------
    MeanFieldSystem
    """
    _check_network(net)
    system = _SYSTEMS.get(net)
    if system is None:
        system = MeanFieldSystem(net)
        _SYSTEMS[net] = system
    return system


def mean_field_rhs(net: Network):
    """The right-hand side ``f(t, y)`` of the mean-field ODE.

    Parameters
    ----------
    net : Network

    Returns
    -------
    callable ``f(t, y) -> ndarray of float64, shape (n_species,)``
        ``f(y) = sum_R k_R nu_R prod_s y_s**r_sR`` in fractions (protocols) or
        concentrations (other networks). Vectorised: no Python loop over reactions.

    References
    ----------
    Kurtz, J. Appl. Prob. 7, 1970 (the ODE is the large-volume limit of the chain).
    """
    return mean_field_system(net).rhs


def mean_field_jacobian(net: Network):
    """The analytic Jacobian ``J(t, y) = df/dy`` of the mean-field ODE.

    Parameters
    ----------
    net : Network

    Returns
    -------
    callable ``J(t, y) -> scipy.sparse.csr_matrix, shape (n_species, n_species)``
    """
    return mean_field_system(net).jacobian


def molecules_per_unit(net: Network) -> float:
    """Molecules in one unit of the ODE state: n for a protocol, the volume otherwise.

    Raises
    ------
    CRNError
        For a protocol network with no agents.
    """
    _check_network(net)
    if net.from_protocol:
        if net.population <= 0:
            raise CRNError("the protocol has no agents: the initial counts add up to 0")
        return float(net.population)
    return float(net.volume)


def initial_state(net: Network) -> np.ndarray:
    """Initial ODE state: fractions ``x0 / n`` (protocols) or concentrations ``x0 / volume``."""
    return np.asarray(net.initial, dtype=np.float64) / molecules_per_unit(net)


def default_horizon(net: Network) -> float:
    """A horizon long enough for the mean field to settle, used when ``until`` is None.

    ``100 (1 + ln N) / r`` with N the molecules per unit and r the fastest
    pseudo-first-order rate ``k_R C**(order_R - 1)`` at the initial total
    ``C`` (one molecule at least). For a protocol r is the largest merged
    transition probability, so the cap is about ``100 (1 + ln n)`` parallel
    time, far beyond the O(log n) consensus time of fast protocols.
    """
    scale = molecules_per_unit(net)
    total = max(float(initial_state(net).sum()), 1.0 / scale)
    rates = np.asarray(net.rates) * total ** (np.asarray(net.orders, dtype=float) - 1.0)
    fastest = float(rates.max(initial=0.0))
    if not fastest > 0:
        return 1.0
    return 100.0 * (1.0 + math.log(max(scale, 1.0))) / fastest


@dataclass(frozen=True)
class MeanFieldResult:
    """A solution of the mean-field ODE.

    Attributes
    ----------
    times : ndarray of float64, shape (n_times,)
        Parallel time for protocols, network time otherwise.
    values : ndarray of float64, shape (n_times, n_species)
        Fractions (protocols) or concentrations (other networks).
    species : tuple of str
    consensus : RunOutcome
        First mean-field consensus (label None if none by the end), the label
        at the end and whether it held.
    status : int
        As :func:`scipy.integrate.solve_ivp`: 0 reached the horizon, 1 stopped
        at consensus, -1 the integration failed (``message`` says why).
    message : str
    units : str
        ``"fraction"`` or ``"concentration"``.
    molecules_per_unit : float
        n for fractions, the volume for concentrations.
    method : str
    """

    times: np.ndarray
    values: np.ndarray
    species: tuple[str, ...]
    consensus: RunOutcome
    status: int
    message: str
    units: str = "fraction"
    molecules_per_unit: float = 1.0
    method: str = "LSODA"

    @property
    def fractions(self) -> dict[str, np.ndarray]:
        """Species name -> fraction of all molecules over time, shape (n_times,) each.

        For protocols these are the ODE values themselves (they sum to 1); for
        other networks each concentration is divided by the total at that time.
        """
        if self.units == "fraction":
            shares = self.values
        else:
            total = self.values.sum(axis=1, keepdims=True)
            with np.errstate(invalid="ignore", divide="ignore"):
                shares = np.where(total > 0, self.values / np.where(total > 0, total, 1), 0.0)
        return {s: shares[:, i] for i, s in enumerate(self.species)}

    @property
    def final(self) -> dict[str, float]:
        """Species name -> value at the last time."""
        return {s: float(v) for s, v in zip(self.species, self.values[-1], strict=True)}


def _validate_times(until, times):
    if times is not None:
        times = np.asarray(times, dtype=np.float64)
        if times.ndim != 1 or times.size == 0:
            raise ValueError("`times` must be a non-empty 1-dimensional sequence")
        if not np.isfinite(times).all() or times[0] < 0 or (np.diff(times) <= 0).any():
            raise ValueError(f"`times` must be finite, non-negative and increasing, got {times}")
    if until is not None:
        until = float(until)
        if not np.isfinite(until) or until <= 0:
            raise ValueError(f"`until` must be a positive finite time, got {until}")
        if times is not None and times[-1] > until:
            raise ValueError(f"`times` must lie within [0, until]; {times[-1]} > {until}")
    return until, times


def _consensus_gap(net: Network, scale: float):
    """Event function: molecules not reporting the leading label, minus (just under) one.

    The others are summed directly (unlabelled species plus every label but the
    leader), never as total minus leader, whose cancellation would turn exactly
    one molecule into slightly fewer. The event fires a hair below one molecule,
    so a trajectory that settles at exactly one never counts as consensus.
    """
    labels = np.asarray(net.species_label)
    labelled = np.flatnonzero(labels >= 0)
    unlabelled = np.flatnonzero(labels == -1)  # IGNORED species (-2) take no part
    label_of = labels[labelled]
    n_labels = len(net.labels)

    def gap(t, y):
        y = np.maximum(y, 0.0)
        totals = np.sort(np.bincount(label_of, weights=y[labelled], minlength=n_labels))
        if totals[-1] <= 0.0:
            return 1.0
        others = y[unlabelled].sum() + totals[:-1].sum()
        return others * scale - (1.0 - _EVENT_SLACK)

    return gap


def _clip_roundoff(values: np.ndarray, rtol: float, atol: float) -> np.ndarray:
    """Set negative values within the integrator's error (roundoff: -1e-17) to 0.

    Fractions and concentrations cannot be negative; the solver's steps can
    undershoot 0 by about its tolerance. Anything further below 0 is left as it
    is, so a real failure stays visible.
    """
    if not values.size:
        return values
    tol = 100.0 * (atol + rtol * float(np.nanmax(np.abs(values))))
    return np.where((values <= 0) & (values >= -tol), 0.0, values)  # -0.0 too


def solve_mean_field(net: Network, *, until=None, times=None, method: str = "LSODA",
                     rtol: float = 1e-10, atol: float = 1e-12,
                     stop_at_consensus: bool = True) -> MeanFieldResult:
    """Solve the mean-field ODE of a network from its initial state.

    Parameters
    ----------
    net : Network
        A protocol network is solved in fractions ``y = x / n`` (limit
        n -> infinity, time = parallel time); any other network in
        concentrations ``c = x / volume``.
    until : float, optional
        Horizon. Default: the last of ``times``, else :func:`default_horizon`
        (the solve normally stops earlier, at consensus).
    times : array_like of float, shape (n_times,), optional
        Increasing non-negative times at which to report the solution (dense
        output of the solver). Default: the solver's own steps. With
        ``stop_at_consensus`` the times after consensus are not reported.
    method : {"LSODA", "BDF", "Radau", "RK45", "DOP853"}
        Integrator of :func:`scipy.integrate.solve_ivp`; the implicit ones get
        the analytic Jacobian (sparse for BDF and Radau, dense for LSODA).
    rtol, atol : float
        Tolerances of the integrator.
    stop_at_consensus : bool, default True
        Stop at the first mean-field consensus: the molecules not reporting the
        leading label number fewer than one (fraction < 1/n).

    Returns
    -------
    MeanFieldResult

    Raises
    ------
    TypeError
        If ``net`` is not a Network.
    ValueError
        For a bad ``method``, ``until``, ``times`` or tolerance.
    CRNError
        For a protocol network with no agents.

    References
    ----------
    Kurtz, J. Appl. Prob. 7, 1970 and J. Chem. Phys. 57:2976, 1972 (the ODE as
    the large-volume limit). Petzold, SIAM J. Sci. Stat. Comput. 4:136, 1983 (LSODA).

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> net = load_model("models/epidemic.toml", {"n": 100}).network
    >>> result = solve_mean_field(net)
    >>> result.consensus.label
    'I'
    """
    _check_network(net)
    if method not in METHODS:
        raise ValueError(f"`method` must be one of {METHODS}, got {method!r}")
    for name, tol in (("rtol", rtol), ("atol", atol)):
        if not (np.isfinite(tol) and tol > 0):
            raise ValueError(f"`{name}` must be positive, got {tol}")
    until, times = _validate_times(until, times)
    scale = molecules_per_unit(net)
    y0 = initial_state(net)
    if until is None:
        until = float(times[-1]) if times is not None and times[-1] > 0 else default_horizon(net)
    system = mean_field_system(net)
    labels = np.asarray(net.species_label)
    n_labels = len(net.labels)
    units = "fraction" if net.from_protocol else "concentration"
    common = dict(species=net.species, units=units, molecules_per_unit=scale, method=method)

    start = mean_field_consensus_index(labels, n_labels, y0, scale)
    if start >= 0 and stop_at_consensus and times is None:
        shown = np.array([0.0])
        values = y0[None, :].copy()
        return MeanFieldResult(times=shown, values=values,
                               consensus=RunOutcome.from_indices(net, start, 0.0, start),
                               status=1, message="consensus at the start", **common)

    events = None
    if n_labels:
        gap = _consensus_gap(net, scale)
        gap.terminal = bool(stop_at_consensus)
        gap.direction = -1.0
        events = [gap]
    options = {}
    if method in ("BDF", "Radau"):
        options["jac"] = system.jacobian
    elif method == "LSODA":
        options["jac"] = lambda t, y: system.jacobian(t, y).toarray()
    # the state at the horizon decides the final label even when the user's times end earlier
    t_eval = times if times is None or times[-1] >= until else np.append(times, until)
    with np.errstate(over="ignore", invalid="ignore"):
        sol = solve_ivp(system.rhs, (0.0, until), y0, method=method, t_eval=t_eval,
                        events=events, rtol=rtol, atol=atol, **options)
    values = _clip_roundoff(np.asarray(sol.y, dtype=np.float64).T.reshape(-1, net.n_species),
                            rtol, atol)
    shown_t = np.asarray(sol.t, dtype=np.float64)
    horizon_state = values[-1] if values.shape[0] else y0
    if t_eval is not times and shown_t.size and shown_t[-1] == until:
        shown_t, values = shown_t[:-1], values[:-1]

    first, first_time = start, 0.0 if start >= 0 else float("nan")
    if first < 0 and events is not None and sol.t_events[0].size:
        first_time = float(sol.t_events[0][0])
        first = mean_field_consensus_index(labels, n_labels, sol.y_events[0][0], scale)
    if sol.status == 1 and events is not None:
        end = sol.y_events[0][-1]
    else:
        end = horizon_state
    last = mean_field_consensus_index(labels, n_labels, np.asarray(end, dtype=np.float64),
                                      scale)
    return MeanFieldResult(times=shown_t, values=values,
                           consensus=RunOutcome.from_indices(net, first, first_time, last),
                           status=int(sol.status), message=str(sol.message), **common)
