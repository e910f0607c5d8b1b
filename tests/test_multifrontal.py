"""Nested-dissection multifrontal LU on configuration lattices (crn.solvers.multifrontal)."""

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from crn.core.network import Network, Reaction
from crn.solvers import multifrontal
from crn.solvers.configurations import enumerate_configurations
from crn.solvers.multifrontal import factorize, plan


def lattice_system(net):
    """``I - Q`` of the network's chain (a nonsingular M-matrix), its lattice and widths."""
    space = enumerate_configurations(net)
    system = (sp.identity(space.n_states) - space.generator()).tocsr()
    widths = np.abs(net.stoichiometry.toarray()).max(axis=1).astype(np.int64)
    return system, space.states, widths


def dimers(a=30, b=20, c=6):
    # net changes of 2 in A and B: the separating bands must be two configurations wide
    return Network.from_reactions(
        "dimers", ("A", "B", "C"),
        [Reaction({"A": 1, "B": 1}, {"C": 1}, 1.5), Reaction({"C": 1}, {"A": 1, "B": 1}, 0.7),
         Reaction({"A": 2}, {"B": 2}, 0.3)],
        volume=2.5, initial={"A": a, "B": b, "C": c})


def test_order_is_a_permutation_and_fronts_tile_it():
    system, coords, widths = lattice_system(dimers())
    layout = plan(system, coords, widths)
    n = system.shape[0]
    assert np.array_equal(np.sort(layout.order), np.arange(n))
    # every position is eliminated by exactly one front
    eliminated = np.zeros(n, dtype=int)
    for t in range(layout.n_fronts):
        eliminated[layout.sep[t]:layout.hi[t]] += 1
        assert np.all(layout.bnd[layout.bptr[t]:layout.bptr[t + 1]] >= layout.hi[t])
    assert np.all(eliminated == 1)
    assert layout.n_fronts > 10  # the lattice was cut, not solved as one dense block


def test_separators_leave_no_entry_between_the_halves():
    # derived: the fill of front t is confined to its rows and its update rows, so every
    # entry (p, q) with q eliminated after p's front must be among that front's update rows
    system, coords, widths = lattice_system(dimers(40, 30, 4))
    layout = plan(system, coords, widths)
    position = np.empty_like(layout.order)
    position[layout.order] = np.arange(layout.order.size)
    front_of = np.empty(layout.order.size, dtype=int)
    for t in range(layout.n_fronts):
        front_of[layout.sep[t]:layout.hi[t]] = t
    coo = system.tocoo()
    for i, j in zip(position[coo.row], position[coo.col], strict=True):
        p, q = min(i, j), max(i, j)
        t = front_of[p]
        if q >= layout.hi[t]:
            assert q in layout.bnd[layout.bptr[t]:layout.bptr[t + 1]]


@pytest.mark.parametrize("large_front", [multifrontal._LARGE_FRONT, 4])
def test_solution_matches_superlu(monkeypatch, large_front):
    # large_front = 4 sends almost every front through the LAPACK path (row exchanges
    # inside the front), the default through the compiled loops (no exchanges)
    monkeypatch.setattr(multifrontal, "_LARGE_FRONT", large_front)
    system, coords, widths = lattice_system(dimers())
    rhs = np.random.default_rng(3).random((system.shape[0], 3))
    factor = factorize(system, plan(system, coords, widths))
    x = factor.solve(rhs)
    reference = spla.splu(system.tocsc()).solve(rhs)
    np.testing.assert_allclose(x, reference, rtol=1e-11, atol=0)
    np.testing.assert_allclose(factor.solve(rhs[:, 0]), reference[:, 0], rtol=1e-11, atol=0)
    # the stored factors hold exactly the entries the plan announced
    assert factor._values.size == factor.plan.entries


def test_one_dimensional_lattice():
    # a single conservation law over two species: the separators are single configurations
    net = Network.from_reactions("swap", ("A", "B"),
                                 [Reaction({"A": 1}, {"B": 1}, 1.0),
                                  Reaction({"B": 1}, {"A": 1}, 2.0)],
                                 initial={"A": 500, "B": 0})
    system, coords, widths = lattice_system(net)
    layout = plan(system, coords, widths)
    rhs = np.arange(system.shape[0], dtype=float)
    np.testing.assert_allclose(factorize(system, layout).solve(rhs),
                               spla.spsolve(system.tocsc(), rhs), rtol=1e-12)
    assert layout.largest_front <= multifrontal._LEAF + 2
