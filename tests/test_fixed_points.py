"""Fixed points on the conserved simplex, their stability, and the equations as sympy."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import sympy

from crn.core.equations import conservation_laws, format_equations, mean_field_equations
from crn.core.protocol import Outcome, Protocol
from crn.core.translate import protocol_to_network
from crn.io.models import load_model
from crn.solvers.fixed_points import classify, conservation_basis, find_fixed_points

ROOT = Path(__file__).resolve().parent.parent


def _load(name, **overrides):
    return load_model(ROOT / "models" / f"{name}.toml", overrides).network


def _by_point(points):
    return {tuple(np.round(p.point, 9)): p for p in points}


@pytest.mark.parametrize("method", ["exact", "numeric"])
def test_approximate_majority_equilibria_and_the_tie_saddle(method):
    net = _load("approximate_majority", n=1000, gap=10)
    points = _by_point(find_fixed_points(net, method=method))
    third = round(1 / 3, 9)
    # derived: dx/dt = x (b - y), dy/dt = y (b - x), b = 1 - x - y. Fixed points need
    # x = 0 or b = y, and y = 0 or b = x: the corners X, Y, B (all blank) and x = y = b = 1/3.
    # (The all-blank corner is a fixed point too, since no rule applies to B, B.)
    assert set(points) == {(1, 0, 0), (0, 1, 0), (0, 0, 1), (third, third, third)}
    tie = points[(third, third, third)]
    # derived: on the simplex (x, y) with b = 1 - x - y the Jacobian of
    # (x (1 - x - 2y), y (1 - 2x - y)) is [[1 - 2x - 2y, -2x], [-2y, 1 - 2x - 2y]]; at
    # x = y = 1/3 it is [[-1/3, -2/3], [-2/3, -1/3]], eigenvalues -1/3 +- 2/3 = 1/3 and -1,
    # with eigenvectors x - y (unstable) and x + y (stable).
    assert tie.classification == "saddle" and tie.tie and tie.consensus is None
    assert tie.n_unstable == 1
    np.testing.assert_allclose(tie.eigenvalues, [1 / 3, -1], atol=1e-10)
    direction = tie.unstable_directions[0] * np.sign(tie.unstable_directions[0][0])
    np.testing.assert_allclose(direction, [2**-0.5, -(2**-0.5), 0], atol=1e-9)
    for corner, label in (((1, 0, 0), "X"), ((0, 1, 0), "Y")):
        # derived: at x = 1 the Jacobian is [[-1, -2], [0, -1]], eigenvalue -1 twice
        assert points[corner].classification == "stable"
        assert points[corner].consensus == label
        np.testing.assert_allclose(points[corner].eigenvalues, [-1, -1], atol=1e-6)
    # derived: at x = y = 0 the Jacobian is the identity: eigenvalue 1 twice
    blank = points[(0, 0, 1)]
    assert blank.classification == "unstable" and blank.n_unstable == 2
    np.testing.assert_allclose(blank.eigenvalues, [1, 1], atol=1e-9)


def test_exact_coordinates_are_rational():
    net = _load("approximate_majority", n=1000, gap=10)
    exact = [p.exact for p in find_fixed_points(net, method="exact")]
    assert {"X": "1/3", "Y": "1/3", "B": "1/3"} in exact


def test_epidemic_fixed_points():
    # derived: df/dt = 2 f (1 - f) has f = 0 (f'(0) = 2, unstable) and f = 1 (f'(1) = -2, stable)
    points = _by_point(find_fixed_points(_load("epidemic", n=1000)))
    assert set(points) == {(1, 0), (0, 1)}
    assert points[(1, 0)].classification == "stable" and points[(1, 0)].consensus == "I"
    np.testing.assert_allclose(points[(1, 0)].eigenvalues, [-2], atol=1e-12)
    assert points[(0, 1)].classification == "unstable"
    np.testing.assert_allclose(points[(0, 1)].eigenvalues, [2], atol=1e-12)


@pytest.mark.parametrize("method", ["exact", "numeric"])
def test_exact_majority_has_one_fixed_point_in_its_class(method):
    # derived: A - B = delta and A + B + a + b = 1 are conserved. A fixed point needs
    # A B = 0, so B = 0 and A = delta; then A b = 0 gives b = 0, a = 1 - delta. In the
    # coordinates (B, b) the Jacobian there is [[-2 delta, 0], [2, -2 delta]]: eigenvalue
    # -2 delta twice, stable.
    n, gap = 100, 4
    delta = gap / n
    points = find_fixed_points(_load("exact_majority", n=n, gap=gap), method=method)
    assert len(points) == 1
    (point,) = points
    np.testing.assert_allclose(point.point, [delta, 0, 1 - delta, 0], atol=1e-10)
    assert point.classification == "stable" and point.consensus == "A"
    np.testing.assert_allclose(point.eigenvalues, [-2 * delta, -2 * delta], atol=1e-6)


def test_continuum_of_fixed_points_is_reported_as_non_isolated():
    # derived: the voter model's mean field is dX/dt = XY - XY = 0: every point is fixed
    (point,) = find_fixed_points(_load("voter"), method="exact")
    assert point.classification == "non-isolated"
    assert point.exact == {"X": "1 - Y", "Y": "Y"}


def test_undecided_state_numeric_agrees_with_exact():
    net = _load("undecided_state", n=1000, gap=10)
    exact = find_fixed_points(net, method="exact")
    numeric = find_fixed_points(net, method="numeric")
    assert set(_by_point(exact)) == set(_by_point(numeric))
    for a, b in zip(exact, numeric, strict=True):
        assert a.classification == b.classification
        np.testing.assert_allclose(a.eigenvalues, b.eigenvalues, atol=1e-6)
    # derived: the field is twice that of approximate majority (both orders), so the tie
    # eigenvalues double: 2/3 and -2
    tie = next(p for p in exact if p.tie)
    np.testing.assert_allclose(tie.eigenvalues, [2 / 3, -2], atol=1e-10)


def test_conservation_basis_is_orthogonal_to_the_stoichiometry():
    net = _load("exact_majority", n=100, gap=4)
    laws, subspace = conservation_basis(net)
    assert laws.shape == (2, 4) and subspace.shape == (4, 2)
    assert np.abs(laws @ net.stoichiometry.toarray()).max() < 1e-12
    np.testing.assert_allclose(subspace.T @ subspace, np.eye(2), atol=1e-12)


def test_classify():
    assert classify([-1, -2 + 1j, -2 - 1j]) == "stable"
    assert classify([1, 0.5]) == "unstable"
    assert classify([1, -1]) == "saddle"
    assert classify([0.0, -1]) == "non-hyperbolic"
    assert classify([]) == "stable"


def test_bad_method_is_refused():
    with pytest.raises(ValueError, match="method"):
        find_fixed_points(_load("epidemic"), method="guess")
    with pytest.raises(ValueError, match="starts"):
        find_fixed_points(_load("epidemic"), method="numeric", starts=0)


def test_equations_as_sympy():
    i, s = sympy.symbols("I S", real=True)
    # derived: the epidemic with both orders is I + S -> 2 I at rate 2
    assert mean_field_equations(_load("epidemic")) == {"I": 2 * i * s, "S": -2 * i * s}
    x, y, b = sympy.symbols("X Y B", real=True)
    eqs = mean_field_equations(_load("approximate_majority"))
    # derived: X,Y -> X,B and Y,X -> Y,B blank at rate x y each; X,B -> X,X recruits at x b
    assert sympy.expand(eqs["X"] - (x * b - x * y)) == 0
    assert sympy.expand(eqs["Y"] - (y * b - x * y)) == 0
    assert sympy.expand(eqs["B"] - (2 * x * y - x * b - y * b)) == 0


def test_conservation_laws_exact():
    laws = conservation_laws(_load("exact_majority"))
    assert laws[0] == {"A": 1, "B": 1, "a": 1, "b": 1}
    assert laws[1] == {"A": 1, "B": -1}


def test_format_equations_text_and_latex():
    text = format_equations(_load("epidemic", n=1000))
    assert "dI/dt = 2*I*S" in text and "dS/dt = -2*I*S" in text and "I + S = 1" in text
    latex = format_equations(_load("approximate_majority"), latex=True)
    assert r"\begin{align*}" in latex and r"\frac{dX}{dt} &= X \left(B - Y\right)" in latex


def test_an_inert_state_gives_its_own_conservation_law():
    # derived: U takes part in no rule, so U alone is conserved (a law with one
    # coefficient), next to X + Y; the equations and fixed points must still work.
    protocol = Protocol("spread", ("U", "X", "Y"), {("X", "Y"): (Outcome("X", "X"),)},
                        {"U": 1, "X": 5, "Y": 4}, {"X": "X", "Y": "Y"})
    net = protocol_to_network(protocol)
    laws = conservation_laws(net)
    assert {"U": 1} in [{k: int(v) for k, v in law.items()} for law in laws]
    assert "dU/dt = 0" in format_equations(net)
    # derived: with u = 1/10 fixed, x' = x y on x + y = 9/10 rests where x y = 0; at
    # (x, y) = (9/10, 0) the perturbation y' = -x y decays at rate 9/10 (stable), at
    # (0, 9/10) x' = x y grows at rate 9/10 (unstable)
    found = {fp.classification: fp for fp in find_fixed_points(net)}
    assert set(found) == {"stable", "unstable"}
    assert found["stable"].exact == {"U": "1/10", "X": "9/10", "Y": "0"}
    assert found["unstable"].exact == {"U": "1/10", "X": "0", "Y": "9/10"}
    assert found["stable"].eigenvalues == pytest.approx([-0.9])
    assert found["unstable"].eigenvalues == pytest.approx([0.9])
