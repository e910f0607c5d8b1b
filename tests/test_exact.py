"""Exact small-population analysis: state spaces, absorption probabilities, times, projections."""

import functools
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats
from scipy.sparse.csgraph import breadth_first_order
from seeds import seed

from crn.core.errors import CRNError
from crn.core.network import Network, Reaction, propensities
from crn.core.protocol import Outcome, Protocol
from crn.core.stats import wilson_interval
from crn.core.translate import protocol_to_network
from crn.io.models import load_model
from crn.solvers.configurations import (
    enumerate_configurations,
    estimate_configurations,
)
from crn.solvers.exact import exact_outcomes, transient_outcomes
from crn.solvers.simulate import simulate

MODELS = Path(__file__).resolve().parents[1] / "models"


def model_net(name, **params):
    return load_model(MODELS / f"{name}.toml", params).network


# -- the chain ---------------------------------------------------------------------------------

def test_generator_rows_are_the_network_propensities():
    # the generator must be the network's own chain: Q[i, j] is the summed propensity
    # (crn.core.network.propensities) of the reactions taking configuration i to j
    net = Network.from_reactions(
        "dimers", ("A", "B", "C"),
        [Reaction({"A": 1, "B": 1}, {"C": 1}, 1.5), Reaction({"C": 1}, {"A": 1, "B": 1}, 0.7),
         Reaction({"A": 2}, {"B": 2}, 0.3)],
        volume=2.5, initial={"A": 5, "B": 2, "C": 1})
    for candidate in (net, model_net("approximate_majority", n=12, gap=2)):
        space = enumerate_configurations(candidate)
        q = space.generator().toarray()
        change = candidate.stoichiometry.toarray().T
        index = {tuple(x): i for i, x in enumerate(space.states)}
        for i, x in enumerate(space.states):
            a = propensities(candidate, x)
            expected = np.zeros(space.n_states)
            for r in np.flatnonzero(a > 0):
                expected[index[tuple(x + change[r].astype(int))]] += a[r]
            expected[i] = -a.sum()
            np.testing.assert_allclose(q[i], expected, rtol=1e-14, atol=0)


def test_state_count_and_estimate_of_approximate_majority():
    # derived: from a split of X and Y every composition of n into (X, Y, B) is
    # reachable except all-blank (the last opinion can never be blanked), so
    # C(n + 2, 2) - 1 configurations; the estimate is the composition count
    n = 200
    net = model_net("approximate_majority", n=n, gap=10)
    assert estimate_configurations(net) == math.comb(n + 2, 2)
    assert enumerate_configurations(net).n_states == math.comb(n + 2, 2) - 1


def test_estimate_uses_every_conservation_law():
    # four-state exact majority: A - B and A + B + a + b are both conserved, so the
    # reachable set is two-dimensional; the estimate must bound it without the
    # cubic composition count (derived: C(n + 3, 3) = 176,851 at n = 100)
    net = model_net("exact_majority", n=100, gap=2)
    estimate = estimate_configurations(net)
    assert enumerate_configurations(net).n_states <= estimate < math.comb(103, 3) // 10


def test_refuses_state_spaces_above_the_limit_with_the_estimate():
    net = model_net("approximate_majority", n=100, gap=2)
    with pytest.raises(CRNError, match="5,151 configurations"):
        exact_outcomes(net, max_states=1000)


def test_open_networks_are_refused_for_exact_analysis():
    net = Network.from_reactions("birth", ("X",), [Reaction({}, {"X": 1}, 1.0)],
                                 initial={"X": 0})
    with pytest.raises(CRNError, match="no conservation law"):
        exact_outcomes(net)


# -- absorption probabilities ------------------------------------------------------------------

@pytest.mark.parametrize("n", range(10, 41, 2))
def test_approximate_majority_tie_is_one_half_each(n):
    # derived: at a tie the protocol is symmetric under swapping X and Y
    result = exact_outcomes(model_net("approximate_majority", n=n, gap=0))
    assert result.probabilities["X"] == pytest.approx(0.5, abs=1e-10)
    assert result.probabilities["Y"] == pytest.approx(0.5, abs=1e-10)
    assert result.probabilities["none"] == 0.0


@pytest.mark.parametrize("n, gap", [(10, 2), (25, 5), (40, 10), (41, 21)])
def test_voter_wrong_consensus_is_the_minority_fraction(n, gap):
    # Perron, Vasudevan, Vojnovic, INFOCOM 2009: the voter model errs with
    # probability equal to the initial minority fraction
    result = exact_outcomes(model_net("voter", n=n, gap=gap))
    minority = (n - gap) // 2
    assert result.probabilities["Y"] == pytest.approx(minority / n, abs=1e-12)
    assert result.p_wrong == pytest.approx(minority / n, abs=1e-12)


def test_cancel_and_spread_can_end_undecided():
    # derived by hand for n = 4, X = Y = 2 (rates 2xy/3, 2xb/3, 2yb/3 at volume 3):
    # N0 = P(all blank) satisfies N0 = 1/5 + (4/5)(1/5) N0, so N0 = 5/21 and the
    # rest splits evenly by symmetry, 8/21 each
    result = exact_outcomes(model_net("cancel_spread", n=4, gap=0))
    assert result.probabilities["none"] == pytest.approx(5 / 21, abs=1e-13)
    assert result.probabilities["X"] == pytest.approx(8 / 21, abs=1e-13)
    assert result.probabilities["Y"] == pytest.approx(8 / 21, abs=1e-13)


@pytest.mark.parametrize("n", [2, 10, 50, 200])
def test_epidemic_time_is_n_minus_1_harmonic(n):
    # derived: both orders infect, so from i infected the next
    # infection comes at rate 2 i (n - i) / (n - 1) in parallel time; the mean is
    # (n - 1) H_{n-1} / n and the variance the sum of the squared mean waits
    result = exact_outcomes(model_net("epidemic", n=n))
    waits = [(n - 1) / (2 * i * (n - i)) for i in range(1, n)]
    harmonic = sum(1 / k for k in range(1, n))
    assert result.expected_time == pytest.approx((n - 1) * harmonic / n, rel=1e-10, abs=1e-10)
    assert result.time_std == pytest.approx(math.sqrt(sum(w * w for w in waits)), rel=1e-8)
    assert result.probabilities["I"] == pytest.approx(1.0, abs=1e-12)
    assert result.probabilities["none"] == 0.0


@pytest.mark.parametrize("n", [200, pytest.param(1000, marks=pytest.mark.slow)])
def test_nested_dissection_agrees_with_superlu(n):
    # the multifrontal solver against SuperLU with minimum degree (the solver of
    # method="direct"): the same equations, so the same numbers to rounding
    net = model_net("approximate_majority", n=n, gap=10)
    superlu = exact_outcomes(net, method="direct")
    dissection = exact_outcomes(net, method="dissection")
    assert (superlu.method, dissection.method) == ("direct", "dissection")
    for label in ("X", "Y"):
        assert dissection.probabilities[label] == pytest.approx(superlu.probabilities[label],
                                                                rel=1e-9)
    assert dissection.expected_time == pytest.approx(superlu.expected_time, rel=1e-9)
    assert dissection.time_std == pytest.approx(superlu.time_std, rel=1e-9)
    assert dissection.residual < 1e-8


def test_auto_uses_nested_dissection_on_large_lattices():
    result = exact_outcomes(model_net("approximate_majority", n=250, gap=10))
    assert result.states > 20_000 and result.method == "dissection"


@functools.cache
def dense_absorption(name, n, gap):
    """P(stable consensus on each label) and the mean time, by a dense solve.

    An independent route: Kemeny, Snell (1960) first-step equations written out
    with numpy over the dense generator and solved by LAPACK, with the
    absorbing set found by scipy's breadth-first search instead of crn's
    (configurations that cannot reach stable consensus are left out: "none").
    """
    net = model_net(name, n=n, gap=gap)
    space = enumerate_configurations(net)
    q = space.generator().toarray()
    labels = list(net.labels)
    graph = sp.csr_matrix(q > 0)
    reach = np.zeros((space.n_states, space.n_states), dtype=bool)
    for i in range(space.n_states):
        reach[i, breadth_first_order(graph, i, return_predecessors=False)] = True
    agree = []
    for x in space.states:
        said = {net.species_label[s] for s in np.flatnonzero(x)} - {-2}  # -2: takes no part
        agree.append(said.pop() if len(said) == 1 else -1)
    agree = np.array(agree)
    stable = np.array([agree[i] if agree[i] >= 0 and np.all(agree[reach[i]] == agree[i])
                       else -1 for i in range(space.n_states)])
    decides = reach[:, stable >= 0].any(axis=1)
    transient = np.flatnonzero((stable < 0) & decides)
    a = -q[np.ix_(transient, transient)]
    rhs = np.column_stack([q[np.ix_(transient, np.flatnonzero(stable == k))].sum(axis=1)
                           for k in range(len(labels))])
    h = np.linalg.solve(a, rhs)
    u = np.linalg.solve(a, h.sum(axis=1))
    start = int(np.flatnonzero(transient == 0)[0])
    return dict(zip(labels, h[start], strict=True)), u[start] / h[start].sum()


@pytest.mark.parametrize("name, n, gap", [("approximate_majority", 30, 4),
                                          ("exact_majority", 16, 2),
                                          ("cancel_spread", 10, 2)])
@pytest.mark.parametrize("method", ["dissection", "direct", "iterative"])
def test_every_solver_matches_a_dense_solve(name, n, gap, method):
    probabilities, mean = dense_absorption(name, n, gap)
    result = exact_outcomes(model_net(name, n=n, gap=gap), method=method)
    for label, p in probabilities.items():
        assert result.probabilities[label] == pytest.approx(p, rel=1e-9, abs=1e-12)
    assert result.expected_time == pytest.approx(mean, rel=1e-9)


@pytest.mark.parametrize("n, gap", [(41, 21), (400, 100)])
def test_nested_dissection_voter_error_is_the_minority_fraction(n, gap):
    # Perron, Vasudevan, Vojnovic, INFOCOM 2009 (as above), on the one-dimensional lattice
    result = exact_outcomes(model_net("voter", n=n, gap=gap), method="dissection")
    assert result.probabilities["Y"] == pytest.approx(((n - gap) // 2) / n, abs=1e-12)


def test_nested_dissection_tie_is_one_half_each():
    # derived: symmetry under swapping X and Y, on the two-dimensional lattice
    result = exact_outcomes(model_net("approximate_majority", n=120, gap=0), method="dissection")
    assert result.probabilities["X"] == pytest.approx(0.5, abs=1e-11)


def test_iterative_solver_agrees_with_factorisation():
    net = model_net("approximate_majority", n=60, gap=4)
    direct = exact_outcomes(net, method="direct")
    iterative = exact_outcomes(net, method="iterative")
    assert iterative.method == "iterative" and iterative.status == 0
    for label in ("X", "Y"):
        assert iterative.probabilities[label] == pytest.approx(direct.probabilities[label],
                                                               abs=1e-9)
    assert iterative.expected_time == pytest.approx(direct.expected_time, rel=1e-8)
    assert iterative.time_std == pytest.approx(direct.time_std, rel=1e-6)


def test_exact_agrees_with_stochastic_simulation_at_n_50():
    from crn.solvers.simulate import simulate

    net = model_net("approximate_majority", n=50, gap=2)
    exact = exact_outcomes(net)
    runs = 4000
    ensemble = simulate(net, runs=runs, until=500.0, engine="direct", rng=seed(20240601), workers=1,
                        stop_at_consensus=True)
    counts = ensemble.outcomes()
    assert counts.get("none", 0) == 0
    for label in ("X", "Y"):
        # Wilson interval at alpha = 0.001 around the SSA frequency must cover the exact value
        _, low, high = wilson_interval(counts.get(label, 0), runs, confidence=0.999)
        assert low <= exact.probabilities[label] <= high
    # consensus is absorbing here, so the first-consensus time of a run is the time to
    # stable consensus: its sample mean lies within 4 standard errors of the exact mean
    mean = np.nanmean(ensemble.consensus_times)
    assert abs(mean - exact.expected_time) <= 4 * exact.time_std / math.sqrt(runs)
    # the sample standard deviation has standard error sd * sqrt((kurtosis - 1) / (4 R))
    # (delta method, common practice); again 4 standard errors
    times = ensemble.consensus_times[np.isfinite(ensemble.consensus_times)]
    kurtosis = stats.kurtosis(times, fisher=False)
    se_sd = exact.time_std * math.sqrt((kurtosis - 1) / (4 * runs))
    assert abs(times.std(ddof=1) - exact.time_std) <= 4 * se_sd


# -- finite state projection -------------------------------------------------------------------

def test_transient_rises_to_the_absorption_probability():
    net = model_net("approximate_majority", n=20, gap=2)
    exact = exact_outcomes(net)
    times = np.array([0.0, 0.5, 1.0, 2.0, 4.0, 8.0, 16.0, 32.0, 64.0, 200.0])
    transient = transient_outcomes(net, times)
    assert np.all(transient["lost"] == 0.0)
    assert transient["none"][0] == 1.0
    for label in ("X", "Y"):
        values = transient[label]
        assert values[0] == 0.0
        assert np.all(np.diff(values) >= -1e-12)
        assert values[-1] == pytest.approx(exact.probabilities[label], abs=1e-8)
    total = transient["X"] + transient["Y"] + transient["none"]
    np.testing.assert_allclose(total, 1.0, atol=1e-12)


def test_transient_scalar_deadline_matches_the_grid():
    net = model_net("approximate_majority", n=16, gap=2)
    grid = transient_outcomes(net, [3.0, 7.0])
    single = transient_outcomes(net, 7.0)
    assert single["X"] == pytest.approx(grid["X"][1], abs=1e-12)


def test_projection_reports_the_lost_mass():
    # derived: pure birth 0 -> X at rate lam from X = 0 is a Poisson process; a
    # projection onto X = 0..K-1 loses exactly P(Poisson(lam t) >= K)
    lam, K, t = 2.0, 12, 3.0
    net = Network.from_reactions("birth", ("X",), [Reaction({}, {"X": 1}, lam)],
                                 initial={"X": 0})
    result = transient_outcomes(net, t, max_states=K)
    assert result["lost"] == pytest.approx(stats.poisson.sf(K - 1, lam * t), abs=1e-12)
    assert result["none"] == pytest.approx(stats.poisson.cdf(K - 1, lam * t), abs=1e-12)


def test_bad_deadline_is_refused():
    with pytest.raises(ValueError, match="until"):
        transient_outcomes(model_net("epidemic", n=5), -1.0)


def test_first_consensus_matches_stochastic_runs_when_consensus_can_be_lost():
    # X, X -> X, Y lets an all-X population leave consensus, so the first consensus
    # and the stable one differ: stable consensus is only ever on Y (derived: from
    # all Y no rule fires; from all X the X, X rule always reintroduces a Y).
    protocol = Protocol(
        "leaky", ("X", "Y"),
        {("X", "Y"): (Outcome("X", "X", 0.5), Outcome("Y", "Y", 0.3)),
         ("X", "X"): (Outcome("X", "Y", 0.2),)},
        {"X": 3, "Y": 2}, {"X": "X", "Y": "Y"}, ("X", "Y"))
    net = protocol_to_network(protocol)
    stable = exact_outcomes(net)
    assert stable.probabilities["Y"] == pytest.approx(1.0, abs=1e-12)
    first = exact_outcomes(net, absorb="first")
    assert sum(first.probabilities.values()) == pytest.approx(1.0, abs=1e-12)
    runs = simulate(net, runs=4000, rng=seed(20261201), workers=1, engine="direct",
                    stop_at_consensus=True, until=1000.0)
    hits = runs.outcomes().get("X", 0)
    # Wilson interval at 99.9% of the 4000 runs' estimate (alpha = 0.001)
    _, low, high = wilson_interval(hits, runs.runs, confidence=0.999)
    assert low <= first.probabilities["X"] <= high
    # mean first-consensus time within 4 standard errors of the runs' mean
    times = runs.consensus_times[np.isfinite(runs.consensus_times)]
    assert abs(times.mean() - first.expected_time) < 4 * times.std(ddof=1) / math.sqrt(times.size)
