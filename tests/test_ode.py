"""Mean-field ODE engine: closed forms, conservation, Jacobian, consensus, and GillesPy2's ODE."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from crn.core.errors import CRNError
from crn.core.network import Network, Reaction
from crn.core.protocol import Outcome, Protocol
from crn.core.translate import protocol_to_network
from crn.io.models import load_model
from crn.solvers.ode import (
    initial_state,
    mean_field_jacobian,
    mean_field_rhs,
    solve_mean_field,
)

MODELS = sorted((Path(__file__).resolve().parent.parent / "models").glob("*.toml"))


def _load(name, **overrides):
    return load_model(Path(__file__).resolve().parent.parent / "models" / f"{name}.toml",
                      overrides).network


def _finite_difference_jacobian(f, y, h=1e-6):
    cols = []
    for j in range(y.size):
        e = np.zeros_like(y)
        e[j] = h
        cols.append((f(0.0, y + e) - f(0.0, y - e)) / (2 * h))
    return np.stack(cols, axis=1)


@pytest.mark.parametrize("method", ["LSODA", "BDF", "Radau", "DOP853"])
@pytest.mark.parametrize("given_times", [False, True])
def test_epidemic_matches_logistic_closed_form(method, given_times):
    # derived (epidemic with both orders): the network is I + S -> 2 I at
    # rate 2, so in fractions df/dt = 2 f (1 - f), solved by separation of variables:
    # f(t) = f0 e^{2t} / (1 - f0 + f0 e^{2t}).
    net = _load("epidemic", n=1000, seeds=1)
    times = np.linspace(0.0, 6.0, 61) if given_times else None
    result = solve_mean_field(net, times=times, method=method)
    f0 = 1 / 1000
    grow = np.exp(2 * result.times)
    logistic = f0 * grow / (1 - f0 + f0 * grow)
    assert result.times.size > 10
    assert np.abs(result.fractions["I"] - logistic).max() < 1e-7
    assert np.abs(result.fractions["S"] - (1 - logistic)).max() < 1e-7
    if given_times:
        np.testing.assert_array_equal(result.times, times)


def test_epidemic_consensus_time_is_where_one_susceptible_is_left():
    # derived: consensus when the susceptible fraction 1 - f(t) falls below 1/n; solving
    # (1 - f0) / (1 - f0 + f0 e^{2t}) = 1/n gives t = ln((n - 1)(1 - f0) / f0) / 2.
    n = 1000
    net = _load("epidemic", n=n, seeds=1)
    result = solve_mean_field(net)
    f0 = 1 / n
    expected = np.log((n - 1) * (1 - f0) / f0) / 2
    assert result.consensus.label == "I"
    assert result.status == 1
    assert result.consensus.time == pytest.approx(expected, rel=1e-8)
    assert result.times[-1] == pytest.approx(expected, rel=1e-8)
    assert result.consensus.held


PROTOCOL_MODELS = [p for p in MODELS if load_model(p).network.from_protocol]


@pytest.mark.parametrize("path", PROTOCOL_MODELS, ids=[p.stem for p in PROTOCOL_MODELS])
@pytest.mark.parametrize("method", ["LSODA", "BDF"])
def test_fractions_sum_to_one_for_every_protocol_model(path, method):
    net = load_model(path).network
    result = solve_mean_field(net, method=method, stop_at_consensus=False, until=50.0)
    total = result.values.sum(axis=1)
    assert result.times.size > 5
    assert np.abs(total - 1).max() < 1e-9
    assert result.status == 0


@pytest.mark.parametrize("path", MODELS, ids=[p.stem for p in MODELS])
def test_jacobian_matches_finite_differences_for_every_model(path):
    net = load_model(path).network
    rng = np.random.default_rng(20240611)
    rhs, jac = mean_field_rhs(net), mean_field_jacobian(net)
    for _ in range(5):
        y = rng.dirichlet(np.ones(net.n_species))
        exact = jac(0.0, y).toarray()
        # common practice: central differences are exact for quadratic fields up to rounding
        assert np.allclose(exact, _finite_difference_jacobian(rhs, y), rtol=1e-6, atol=1e-8)


def _higher_order_network():
    reactions = [
        Reaction({}, {"A": 1}, 0.7),
        Reaction({"A": 1}, {}, 0.3),
        Reaction({"A": 2}, {"B": 1}, 1.5),
        Reaction({"A": 1, "B": 1}, {"C": 2}, 0.25),
        Reaction({"A": 3}, {"A": 1, "C": 1}, 0.125),
        Reaction({"A": 1, "B": 1, "C": 1}, {"B": 2}, 2.0),
        Reaction({"C": 2}, {"A": 1, "C": 1}, 0.5),
    ]
    return Network.from_reactions("mixed orders", ["A", "B", "C"], reactions, volume=3.0,
                                  initial={"A": 6, "B": 3, "C": 0})


def test_rhs_and_jacobian_of_mixed_orders_match_mass_action_by_hand():
    net = _higher_order_network()
    a, b, c = 0.4, 1.3, 0.9
    # derived: sum over reactions of k nu prod c^r, term by term from the list above
    r = [0.7, 0.3 * a, 1.5 * a**2, 0.25 * a * b, 0.125 * a**3, 2.0 * a * b * c, 0.5 * c**2]
    expected = np.array([
        r[0] - r[1] - 2 * r[2] - r[3] - 2 * r[4] - r[5] + r[6],
        r[2] - r[3] + r[5],
        2 * r[3] + r[4] - r[5] - r[6],
    ])
    y = np.array([a, b, c])
    np.testing.assert_allclose(mean_field_rhs(net)(0.0, y), expected, rtol=1e-13)
    fd = _finite_difference_jacobian(mean_field_rhs(net), y)
    np.testing.assert_allclose(mean_field_jacobian(net)(0.0, y).toarray(), fd, rtol=1e-6,
                               atol=1e-8)


@st.composite
def protocols(draw):
    k = draw(st.integers(2, 5))
    states = tuple(f"S{i}" for i in range(k))
    transitions = {}
    for p in states:
        for q in states:
            if not draw(st.booleans()):
                continue
            weights = draw(st.lists(st.floats(0.05, 1.0), min_size=1, max_size=3))
            budget = draw(st.floats(0.1, 1.0)) / sum(weights)
            outcomes = tuple(
                Outcome(draw(st.sampled_from(states)), draw(st.sampled_from(states)), w * budget)
                for w in weights)
            transitions[(p, q)] = outcomes
    counts = draw(st.lists(st.integers(0, 50), min_size=k, max_size=k))
    counts[0] += 1
    return Protocol("random", states, transitions, dict(zip(states, counts, strict=True)))


@settings(max_examples=60, deadline=None)
@given(protocols(), st.integers(0, 2**32 - 1))
def test_jacobian_matches_finite_differences_for_random_protocols(protocol, seed):
    net = protocol_to_network(protocol)
    y = np.random.default_rng(seed).dirichlet(np.ones(net.n_species))
    exact = mean_field_jacobian(net)(0.0, y).toarray()
    fd = _finite_difference_jacobian(mean_field_rhs(net), y)
    # common practice: central differences, step 1e-6, exact for quadratics up to rounding
    assert np.allclose(exact, fd, rtol=1e-6, atol=1e-8)
    # derived: a protocol keeps the number of agents, so the columns of J sum to zero
    assert np.abs(exact.sum(axis=0)).max() < 1e-12


@pytest.mark.parametrize("gap", [2, 10, 100])
def test_approximate_majority_reaches_consensus_on_the_larger_input(gap):
    net = _load("approximate_majority", n=1000, gap=gap)
    result = solve_mean_field(net)
    assert result.consensus.label == "X"
    assert result.consensus.final_label == "X"
    assert result.status == 1
    # derived: consensus means Y + B < 1/n at the stopping point
    y, b = result.values[-1, 1], result.values[-1, 2]
    assert (y + b) * 1000 == pytest.approx(1.0, rel=1e-6)
    assert np.all((result.values[:-1, 1] + result.values[:-1, 2]) * 1000 > 1 - 1e-6)


def test_tie_never_reaches_consensus_and_stays_on_the_stable_manifold():
    # derived: with x0 = y0 the symmetry x <-> y keeps x = y for ever; the flow goes to the
    # tie point (1/3, 1/3, 1/3) along its stable direction.
    net = _load("approximate_majority", n=1000, gap=0)
    result = solve_mean_field(net, until=60.0)
    assert result.consensus.label is None and result.consensus.time is None
    assert result.status == 0
    np.testing.assert_allclose(result.values[-1], [1 / 3, 1 / 3, 1 / 3], atol=1e-8)


def test_times_past_consensus_are_dropped_unless_asked_to_continue():
    net = _load("approximate_majority", n=1000, gap=10)
    times = np.linspace(0, 40, 9)
    stopped = solve_mean_field(net, times=times)
    assert stopped.consensus.time < 40
    np.testing.assert_array_equal(stopped.times, times[times <= stopped.consensus.time])
    full = solve_mean_field(net, times=times, stop_at_consensus=False)
    np.testing.assert_array_equal(full.times, times)
    assert full.consensus.time == pytest.approx(stopped.consensus.time, rel=1e-8)
    assert full.consensus.held


def test_network_in_concentrations_matches_birth_death_mean():
    # derived (birth-death): 0 -> X at lambda (per unit volume), X -> 0 at mu:
    # dc/dt = lambda - mu c, so c(t) = c0 e^{-mu t} + (lambda/mu)(1 - e^{-mu t}).
    lam, mu, volume = 3.0, 0.5, 2.5
    net = Network.from_reactions("birth-death", ["X"], [Reaction({}, {"X": 1}, lam),
                                                        Reaction({"X": 1}, {}, mu)],
                                 volume=volume, initial={"X": 20})
    times = np.linspace(0, 10, 21)
    result = solve_mean_field(net, times=times)
    c0 = 20 / volume
    expected = c0 * np.exp(-mu * times) + lam / mu * (1 - np.exp(-mu * times))
    assert result.units == "concentration" and result.molecules_per_unit == volume
    np.testing.assert_allclose(result.values[:, 0], expected, rtol=1e-8)
    assert result.consensus.label is None
    np.testing.assert_array_equal(result.fractions["X"], np.ones_like(times))


def test_consensus_at_the_start_returns_at_once():
    net = _load("epidemic", n=50, seeds=50)
    result = solve_mean_field(net)
    assert result.consensus.label == "I" and result.consensus.time == 0.0
    np.testing.assert_array_equal(result.times, [0.0])


@pytest.mark.parametrize("kwargs, match", [
    ({"method": "Euler"}, "method"),
    ({"until": -1.0}, "until"),
    ({"until": float("nan")}, "until"),
    ({"times": [0.0, 2.0, 1.0]}, "times"),
    ({"times": [0.0, 5.0], "until": 2.0}, "times"),
    ({"rtol": 0.0}, "rtol"),
])
def test_bad_arguments_raise_value_error(kwargs, match):
    net = _load("epidemic", n=10)
    with pytest.raises(ValueError, match=match):
        solve_mean_field(net, **kwargs)


def test_protocol_without_agents_is_refused():
    net = _load("epidemic", n=10).with_initial({"I": 0, "S": 0})
    with pytest.raises(CRNError, match="no agents"):
        solve_mean_field(net)
    with pytest.raises(TypeError, match="Network"):
        solve_mean_field("models/epidemic.toml")


def _gillespy2_ode(net, times):
    """GillesPy2's ODESolver on the network built by crn.engines.gillespy2_bridge.to_gillespy2.

    Read in gillespy2/core/reaction.py (_create_mass_action) and
    solvers/numpy/ode_solver.py: its mass-action ODE rate is ``k * prod x**r`` in the
    species' own values with no volume factor, i.e. our law with the state measured in
    our units. So we hand it our initial state (fractions or concentrations) and compare
    its output with ours directly.
    """
    import gillespy2

    from crn.engines.gillespy2_bridge import to_gillespy2

    model = to_gillespy2(net)
    for name, value in zip(net.species, initial_state(net), strict=True):
        model.listOfSpecies[name].mode = "continuous"
        model.listOfSpecies[name].initial_value = float(value)
    model.timespan(times)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = model.run(solver=gillespy2.ODESolver(model=model),
                        integrator_options={"rtol": 1e-11, "atol": 1e-13})[0]
    return np.stack([np.asarray(run[s], dtype=np.float64) for s in net.species], axis=1)


@pytest.mark.parametrize("net", [
    _load("approximate_majority", n=200, gap=10),
    _load("exact_majority", n=100, gap=4),
    _higher_order_network().with_rates([0.7, 0.3, 1.5, 0.25, 0.0, 0.0, 0.5]),
], ids=["approximate_majority", "exact_majority", "network_in_concentrations"])
def test_agrees_with_gillespy2_ode_solver(net):
    # GillesPy2 refuses mass action above order 2; the mixed network keeps orders 0-2.
    times = np.linspace(0.0, 30.0, 301)
    ours = solve_mean_field(net, times=times, stop_at_consensus=False)
    theirs = _gillespy2_ode(net, times)
    assert ours.values.shape == theirs.shape
    assert np.abs(ours.values - theirs).max() < 1e-6


@pytest.mark.parametrize("method", ["LSODA", "BDF", "RK45"])
@pytest.mark.parametrize("n", [3, 100, 12345])
def test_one_silent_agent_forever_blocks_consensus(method, n):
    # derived: with X, Y -> X, X and one inert agent U that reports nothing, the U
    # fraction stays exactly 1/n, i.e. exactly one molecule: never fewer than one
    # (docs/design.md), so the mean field never reaches consensus, whatever the integrator.
    protocol = Protocol("spread", ("X", "Y", "U"), {("X", "Y"): (Outcome("X", "X"),)},
                        {"X": n // 2, "Y": n - n // 2 - 1, "U": 1}, {"X": "X", "Y": "Y"})
    result = solve_mean_field(protocol_to_network(protocol), until=200.0, method=method)
    assert result.consensus.label is None
    assert result.consensus.final_label is None


def test_final_label_is_taken_at_the_horizon_not_at_the_last_requested_time():
    # derived: approximate majority from 60% X reaches consensus at t = 13.11 (ODE), so
    # with times up to 2 and a horizon of 100 the state at the horizon is all X.
    net = _load("approximate_majority", n=1000, gap=200)
    result = solve_mean_field(net, until=100.0, times=[0.0, 1.0, 2.0], stop_at_consensus=False)
    assert result.times.tolist() == [0.0, 1.0, 2.0]
    assert result.consensus.label == "X" and result.consensus.final_label == "X"
    assert result.consensus.held


def test_consensus_at_the_start_still_reports_the_requested_times():
    net = _load("approximate_majority", n=1000, gap=1000)  # derived: all X from the start
    result = solve_mean_field(net, times=[1.0, 2.0])
    assert result.times.tolist() == [1.0, 2.0]
    assert result.consensus.time == 0.0 and result.consensus.label == "X"
    assert np.allclose(result.values[-1], [1.0, 0.0, 0.0])
