"""Droplet loading: how many strands of each input a droplet receives.

A droplet cut from a well-mixed sample receives each kind of strand
independently and Poisson-distributed around its mean (the droplet's share
of the sample), so the total and the gap vary from droplet to droplet, and a
droplet whose counts reverse or tie the mean gap sometimes receives the
wrong majority. With mean total ``n`` and mean gap ``g`` the majority input
has mean ``(n + g) / 2`` and the minority ``(n - g) / 2``; their difference
follows the Skellam distribution (Skellam, J. R. Stat. Soc. 109(3):296, 1946).

This module gives the loading weights over the relevant counts, draws
droplets, builds a droplet's network and solves every split of one total
exactly (one state space, all starting splits at once).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from crn.core.errors import CRNError
from crn.core.network import Network

if TYPE_CHECKING:
    from collections.abc import Sequence

    from crn.core.types import SeedLike

__all__ = [
    "LOADINGS",
    "LoadingGrid",
    "poisson_means",
    "loading_grid",
    "reversal_probability",
    "draw_droplets",
    "droplet_network",
    "split_decisions",
]

#: State spaces up to this size take the dense matrix exponential (faster than Krylov there).
_DENSE_LIMIT = 200

#: Loading models: ``fixed`` (every droplet gets exactly the mean counts), ``poisson``.
LOADINGS = ("fixed", "poisson")


def poisson_means(n: float, gap: float) -> tuple[float, float]:
    """Mean counts ``((n + gap) / 2, (n - gap) / 2)`` of the majority and minority inputs.

    Raises
    ------
    CRNError
        Unless ``0 <= gap < n``.
    """
    n, gap = float(n), float(gap)
    if not (n > 0 and 0 <= gap < n):
        raise CRNError(f"Poisson loading needs a mean total n > 0 and 0 <= gap < n, "
                       f"got n={n:g}, gap={gap:g}")
    return (n + gap) / 2.0, (n - gap) / 2.0


@dataclass(frozen=True)
class LoadingGrid:
    """Droplet contents with non-negligible probability and their weights.

    Attributes
    ----------
    major, minor : ndarray of int64
        Counts of the majority and minority inputs, one entry per (major, minor) pair.
    weight : ndarray of float64
        Probability of each pair (independent Poisson counts).
    covered : float
        Total weight of the grid; ``1 - covered`` is the probability left out.
    """

    major: np.ndarray
    minor: np.ndarray
    weight: np.ndarray
    covered: float

    @property
    def totals(self) -> np.ndarray:
        """Distinct droplet totals ``major + minor``, ascending."""
        return np.unique(self.major + self.minor)

    def reversal(self) -> tuple[float, float]:
        """P(minority count > majority count) and P(equal counts) over the grid."""
        return (float(self.weight[self.minor > self.major].sum()),
                float(self.weight[self.minor == self.major].sum()))


def loading_grid(n: float, gap: float, tail: float = 1e-9) -> LoadingGrid:
    """The (major, minor) counts covering all but about ``tail`` of the Poisson loading.

    Each count runs between its Poisson quantiles ``tail / 4`` and
    ``1 - tail / 4``; the weights are exact Poisson probabilities.

    Parameters
    ----------
    n, gap : float
        Mean total and mean gap (see :func:`poisson_means`).
    tail : float
        Probability allowed outside the grid, in (0, 1).

    Returns
    -------
    LoadingGrid
    """
    from scipy.stats import poisson

    if not 0 < tail < 1:
        raise CRNError(f"tail must lie in (0, 1), got {tail}")
    lam_a, lam_b = poisson_means(n, gap)
    axes, probs, covered = [], [], 1.0
    for lam in (lam_a, lam_b):
        lo = int(poisson.ppf(tail / 4, lam))
        hi = int(poisson.isf(tail / 4, lam))
        k = np.arange(lo, hi + 1, dtype=np.int64)
        pk = poisson.pmf(k, lam)
        axes.append(k)
        probs.append(pk)
        covered *= float(pk.sum())
    a, b = np.meshgrid(axes[0], axes[1], indexing="ij")
    w = np.outer(probs[0], probs[1])
    return LoadingGrid(a.ravel(), b.ravel(), w.ravel(), covered)


def reversal_probability(n: float, gap: float, tail: float = 1e-12) -> float:
    """P(the minority count reaches or passes the majority count) under Poisson loading.

    ``sum_a P(A = a) P(B >= a)`` over the majority count's Poisson range
    (all but ``tail``): the Skellam probability ``P(A - B <= 0)``, in one
    dimension so it stays cheap for large droplets.
    """
    from scipy.stats import poisson

    lam_a, lam_b = poisson_means(n, gap)
    lo, hi = int(poisson.ppf(tail / 2, lam_a)), int(poisson.isf(tail / 2, lam_a))
    a = np.arange(lo, hi + 1)
    return float(poisson.pmf(a, lam_a) @ poisson.sf(a - 1, lam_b))


def draw_droplets(n: float, gap: float, size: int,
                  rng: SeedLike) -> tuple[np.ndarray, np.ndarray]:
    """Majority and minority counts of ``size`` Poisson-loaded droplets.

    Parameters
    ----------
    n, gap : float
    size : int
    rng : numpy.random.Generator, int or SeedSequence

    Returns
    -------
    major, minor : ndarray of int64, shape (size,)
    """
    lam_a, lam_b = poisson_means(n, gap)
    generator = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    major = generator.poisson(lam_a, size=int(size)).astype(np.int64)
    minor = generator.poisson(lam_b, size=int(size)).astype(np.int64)
    return major, minor


def droplet_network(networks: Callable[[int, int], Network], major: int, minor: int) -> Network:
    """The network of a droplet holding ``major`` and ``minor`` copies of the two inputs.

    Built as ``networks(total, |major - minor|)`` with the two inputs' counts
    swapped when the minority input came out ahead, so species a model file
    derives from the total (blank states, leaders) follow it.

    Raises
    ------
    CRNError
        For an empty droplet or a network without two input states.
    """
    major, minor = int(major), int(minor)
    if major < 0 or minor < 0 or major + minor < 1:
        raise CRNError(f"a droplet needs at least one strand, got {major} and {minor}")
    net = networks(major + minor, abs(major - minor))
    if major >= minor:
        return net
    if net.inputs is None:
        raise CRNError("the model asks no majority question ([question] majority = [...])")
    i, j = net.inputs
    x0 = np.array(net.initial, dtype=np.int64)
    x0[i], x0[j] = x0[j], x0[i]
    return net.with_initial(x0)


def _reaching(space, targets: np.ndarray) -> np.ndarray:
    """Configurations from which some configuration in ``targets`` can be reached."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import breadth_first_order

    size = space.n_states
    # reversed transitions, plus a source node (index size) pointing at every target
    rows = np.concatenate([space.dst, np.full(int(targets.sum()), size)])
    cols = np.concatenate([space.src, np.flatnonzero(targets)])
    graph = csr_matrix((np.ones(rows.size), (rows, cols)), shape=(size + 1, size + 1))
    order = breadth_first_order(graph, size, directed=True, return_predecessors=False)
    out = np.zeros(size + 1, dtype=bool)
    out[order] = True
    return out[:size]


def split_decisions(networks: Callable[[int, int], Network], total: int, majors: Sequence[int],
                    truth: str, deadline: float | None = None,
                    max_states: int | None = None) -> np.ndarray:
    """P(correct consensus [by ``deadline``]) of a droplet of ``total`` strands, per split.

    One state space is enumerated from the most even split; every split
    ``(a, total - a)`` lying in it is solved at once: without a deadline the
    probability that the first consensus is on ``truth`` (absorption,
    Kemeny and Snell 1960, as :func:`crn.solvers.exact.exact_outcomes` with
    ``absorb="first"``); with one, the probability of stable consensus on
    ``truth`` by then (the backward equation ``u(t) = exp(t Q) 1_truth`` with
    the stable-consensus configurations frozen, which is the transient
    analysis of :func:`crn.solvers.exact.transient_outcomes` for every start at once).
    Splits outside that space get a space of their own.

    Parameters
    ----------
    networks : callable (n, gap) -> Network
    total : int
    majors : sequence of int
        Counts of the majority input (the minority gets the rest).
    truth : str
        The label counted as correct (the majority of the mean loading).
    deadline : float, optional
    max_states : int, optional
        Passed to the enumeration.

    Returns
    -------
    ndarray of float64, shape (len(majors),)
    """
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    from crn.solvers.configurations import consensus_labels, enumerate_configurations
    from crn.solvers.exact import stable_consensus

    majors = [int(a) for a in majors]
    starts = [np.asarray(droplet_network(networks, a, total - a).initial, dtype=np.int64)
              for a in majors]
    out = np.full(len(majors), np.nan)
    # the most even split first: its space holds every split for the bundled protocols
    todo = sorted(range(len(majors)), key=lambda i: abs(2 * majors[i] - total))
    while todo:
        net = droplet_network(networks, majors[todo[0]], total - majors[todo[0]])
        labels = list(net.labels)
        if truth not in labels:
            raise CRNError(f"label {truth!r} is not an output of the model")
        k_truth = labels.index(truth)
        space = enumerate_configurations(net, max_states=max_states)
        q = space.generator()
        if deadline is None:
            consensus = consensus_labels(net, space.states)
            absorbing = consensus >= 0
            transient = np.flatnonzero(_reaching(space, absorbing) & ~absorbing)
            value = (consensus == k_truth).astype(float)
            if transient.size:
                system = (-q[transient][:, transient]).tocsc()
                rhs = np.asarray(q[transient] @ (consensus == k_truth).astype(float)).ravel()
                value[transient] = spla.splu(system, permc_spec="MMD_AT_PLUS_A").solve(rhs)
        else:
            stable = stable_consensus(net, space)
            frozen = (sp.diags((stable < 0).astype(float)) @ q).tocsr()
            goal = (stable == k_truth).astype(float)
            if space.n_states <= _DENSE_LIMIT:
                from scipy.linalg import expm

                value = expm(frozen.toarray() * float(deadline)) @ goal
            else:
                value = spla.expm_multiply(frozen * float(deadline), goal)
        value = np.clip(value, 0.0, 1.0)
        index = {row.tobytes(): i for i, row in enumerate(space.states)}
        left = []
        for i in todo:
            found = index.get(starts[i].tobytes())
            if found is None:
                left.append(i)
            else:
                out[i] = value[found]
        todo = left
    return out
