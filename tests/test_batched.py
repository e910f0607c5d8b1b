"""The batched engine against exact laws: small chains, the epidemic, Kurtz, the direct method."""

import itertools
import math

import numpy as np
import pytest
from scipy import stats
from scipy.linalg import expm

import crn.engines.batched as batched_module
from crn.engines.batched import _collision_free_length, protocol_tables, run_batched
from crn.errors import CRNError, ModelError
from crn.io.models import load_model
from crn.network import Network, Reaction, propensities
from crn.protocol import Outcome, Protocol
from crn.translate import protocol_to_network

ALPHA = 0.001  # significance of every statistical test in this file
MODELS = "models"


def _am(n, gap):
    return load_model(f"{MODELS}/approximate_majority.toml", {"n": n, "gap": gap}).network


def _seeds(root, runs):
    return np.random.SeedSequence(root).spawn(runs)


def _generator(net):
    """Generator of the network's Markov chain on counts (the DESIGN.md propensities)."""
    n = net.population
    states = [s for s in itertools.product(range(n + 1), repeat=net.n_species) if sum(s) == n]
    index = {s: i for i, s in enumerate(states)}
    change = net.stoichiometry.toarray().astype(np.int64)
    q = np.zeros((len(states), len(states)))
    for s in states:
        for r, a in enumerate(propensities(net, np.array(s))):
            if a > 0:
                q[index[s], index[tuple(np.array(s) + change[:, r])]] += a
                q[index[s], index[s]] -= a
    return states, index, q


def _chi_square(observed, probabilities):
    """Pearson p-value, cells expected below 5 pooled into one."""
    observed = np.asarray(observed, dtype=float)
    expected = np.asarray(probabilities) * observed.sum()
    keep = expected >= 5
    obs = np.append(observed[keep], observed[~keep].sum())
    exp = np.append(expected[keep], expected[~keep].sum())
    if exp[-1] < 5:
        obs, exp = obs[:-1], exp[:-1]
        exp *= obs.sum() / exp.sum()
    return stats.chisquare(obs, exp).pvalue


@pytest.fixture(params=["cells", "agents", "joint"])
def pairing(request, monkeypatch):
    """Force one of the three ways of drawing and matching initiators and responders in a
    batch (``joint``: all 2 l agents in one draw, as for protocols with many states)."""
    monkeypatch.setattr(batched_module, "_AGENT_FACTOR", 0.0 if request.param == "cells" else 1e18)
    monkeypatch.setattr(batched_module, "_JOINT_FROM_STATES",
                        0 if request.param == "joint" else 10**9)
    return request.param


def _fragile():
    """Consensus on "a" can be reached and lost: A fixes B, and two A may break one."""
    transitions = {("A", "B"): (Outcome("A", "A"),), ("A", "A"): (Outcome("A", "B", 0.2),)}
    protocol = Protocol("fragile", ("A", "B"), transitions, {"A": 4, "B": 4}, {"A": "a"})
    return protocol_to_network(protocol)


def test_collision_free_length_has_the_birthday_law():
    # derived: P(L >= l) = prod_{i<l} (n-2i)(n-2i-1) / (n(n-1)), capped at (n-1)//2
    import numba

    @numba.njit
    def draws(rng, n, cap, size):
        out = np.empty(size, dtype=np.int64)
        for i in range(size):
            out[i] = _collision_free_length(rng, n, cap)
        return out

    for n in (40, 3000):
        cap = (n - 1) // 2
        x = draws(np.random.default_rng(n), n, cap, 40_000)
        ell = np.arange(1, cap + 1)
        factors = (n - 2.0 * ell) * (n - 2.0 * ell - 1) / (n * (n - 1.0))
        tail = np.concatenate([[1.0], np.cumprod(factors)])
        pmf = tail[:-1] - np.append(tail[1:-1], 0.0)  # P(L = l), the last cell takes P(L >= cap)
        assert x.min() >= 1 and x.max() <= cap
        assert _chi_square(np.bincount(x, minlength=cap + 1)[1:], pmf) > ALPHA


def test_small_population_counts_match_the_exact_transient_law(pairing):
    # exact: row of expm(Q t) of the network's chain (Munsky, Khammash 2006: exact on a
    # finite state space); batching forced so that every batch path runs at n = 8
    net = _am(8, 2)
    states, index, q = _generator(net)
    until = 0.7
    exact = expm(q * until)[index[tuple(net.initial)]]
    observed = np.zeros(len(states))
    for seed in _seeds(1, 4000):
        run = run_batched(net, until=until, times=[until], rng=seed, batch_threshold=0.0)
        observed[index[tuple(run.counts[0])]] += 1
    assert _chi_square(observed, exact) > ALPHA


def test_discrete_clock_matches_the_embedded_chain(pairing):
    # exact: the protocol's one-interaction transition matrix to the power K (DESIGN.md:
    # ordered pairs uniform over n(n-1)); K = 6 interactions at n = 8 is time 6/8 exactly
    model = load_model(f"{MODELS}/approximate_majority.toml", {"n": 8, "gap": 2})
    net, protocol = model.network, model.protocol
    states, index, _ = _generator(net)
    names = {s: i for i, s in enumerate(protocol.states)}
    step = np.zeros((len(states), len(states)))
    for s in states:
        x = np.array(s)
        for p, q in itertools.product(range(3), repeat=2):
            pair = x[p] * (x[q] - (p == q)) / (8 * 7)
            if pair == 0:
                continue
            stay = pair
            for o in protocol.outcomes(protocol.states[p], protocol.states[q]):
                y = x.copy()
                y[p] -= 1
                y[q] -= 1
                y[names[o.initiator]] += 1
                y[names[o.responder]] += 1
                step[index[s], index[tuple(y)]] += pair * o.probability
                stay -= pair * o.probability
            step[index[s], index[s]] += stay
    exact = np.linalg.matrix_power(step, 6)[index[tuple(net.initial)]]
    observed = np.zeros(len(states))
    for seed in _seeds(2, 4000):
        run = run_batched(net, until=0.75, times=[0.75], rng=seed, clock="discrete",
                          batch_threshold=0.0)
        observed[index[tuple(run.counts[0])]] += 1
    assert _chi_square(observed, exact) > ALPHA


def test_first_consensus_time_when_consensus_can_be_lost(pairing):
    # exact: P(first consensus <= t) is the mass absorbed by time t in the chain where the
    # all-A state is made absorbing (first passage); time scale 0.5 here (network_to_protocol)
    net = _fragile()
    assert protocol_tables(net)["time_scale"] == 0.5
    states, index, q = _generator(net)
    target = index[(8, 0)]
    q[target, :] = 0.0
    grid = np.array([0.1, 0.2, 0.4, 0.8])
    start = index[tuple(net.initial)]
    absorbed = np.array([expm(q * t)[start, target] for t in grid])
    cells = np.diff(np.concatenate([[0.0], absorbed, [1.0]]))
    for stop, root in ((False, 3), (True, 4)):
        observed = np.zeros(len(grid) + 1)
        for seed in _seeds(root, 3000):
            run = run_batched(net, until=grid[-1], times=[grid[-1]], rng=seed,
                              stop_at_consensus=stop, batch_threshold=0.0)
            t = np.inf if run.outcome.time is None else run.outcome.time
            observed[np.searchsorted(grid, t)] += 1
            if stop and run.status == "consensus":
                # the state rebuilt inside the batch is the consensus itself
                assert tuple(run.counts[-1]) == (8, 0) and run.end_time == run.outcome.time
        assert _chi_square(observed, cells) > ALPHA


def _harmonic(m):
    return math.fsum(1.0 / k for k in range(1, m + 1))


@pytest.mark.parametrize("both_orders", [True, False])
def test_epidemic_mean_consensus_time_at_a_million(both_orders):
    # REFERENCES.md [derived]: (n-1) H_{n-1} / n with both orders infecting, twice that when
    # only the initiator infects; 4 standard errors of the mean of R runs
    n, runs = 10**6, 120
    if both_orders:
        net = load_model(f"{MODELS}/epidemic.toml", {"n": n}).network
        expected = (n - 1) * _harmonic(n - 1) / n
    else:
        protocol = Protocol("one-way epidemic", ("I", "S"), {("I", "S"): (Outcome("I", "I"),)},
                            {"I": 1, "S": n - 1}, {"I": "I"})
        net = protocol_to_network(protocol)
        expected = 2 * (n - 1) * _harmonic(n - 1) / n
    times = np.array([run_batched(net, until=math.inf, rng=seed, stop_at_consensus=True)
                      .outcome.time for seed in _seeds(5 + both_orders, runs)])
    assert abs(times.mean() - expected) < 4 * times.std(ddof=1) / math.sqrt(runs)


def test_kurtz_batched_runs_follow_the_ode_at_a_million():
    # Kurtz 1970/1972 (REFERENCES.md): fluctuations of x/n scale as n^-1/2; bound 6/sqrt(n)
    from crn.ode import solve_mean_field

    n = 10**6
    net = _am(n, 0).with_initial({"X": n // 2, "Y": 2 * n // 5, "B": n // 10})
    times = np.linspace(0.0, 6.0, 13)
    ode = solve_mean_field(net, times=times, stop_at_consensus=False).values
    for seed in _seeds(7, 4):
        run = run_batched(net, until=times[-1], times=times, rng=seed)
        assert run.outcome.label is None  # all sample times are before consensus
        assert np.abs(run.counts / n - ode).max() < 6 / math.sqrt(n)


def test_direct_and_batched_agree_in_distribution(pairing):
    # two-sample KS on consensus times and chi-square on X at a fixed time, both at ALPHA
    from crn.engines.direct import run_direct

    net = _am(1000, 0)
    runs, fixed = 300, 3.0
    common = dict(until=400.0, times=[fixed], stop_at_consensus=True)
    direct = [run_direct(net, rng=s, **common) for s in _seeds(8, runs)]
    batched = [run_batched(net, rng=s, batch_threshold=0.0, **common) for s in _seeds(9, runs)]
    t_direct = [r.outcome.time for r in direct]
    t_batched = [r.outcome.time for r in batched]
    assert None not in t_direct and None not in t_batched
    assert stats.ks_2samp(t_direct, t_batched).pvalue > ALPHA
    x_direct = np.array([r.counts[0, 0] for r in direct])
    x_batched = np.array([r.counts[0, 0] for r in batched])
    edges = np.quantile(np.concatenate([x_direct, x_batched]), np.linspace(0, 1, 9))
    table = np.array([np.histogram(x, edges)[0] for x in (x_direct, x_batched)])
    assert stats.chi2_contingency(table).pvalue > ALPHA


def test_two_to_the_sixty_agents_fire_the_expected_number_of_events():
    # derived: E[events by t] = n * integral of sum_R k_R prod y^r (the ODE's reaction
    # rates in fractions); for t = 1e-6 the count is Poisson-like, so 6 sqrt(E) bounds it
    from scipy.integrate import quad

    from crn.network import deterministic_rates
    from crn.ode import solve_mean_field

    n = 2**60
    net = _am(n, 0).with_initial({"X": n // 2, "Y": 3 * n // 8, "B": n // 8})
    until = 1e-6
    run = run_batched(net, until=until, times=[until], rng=10)
    assert run.counts.sum() == n
    ode = solve_mean_field(net, until=until, stop_at_consensus=False)
    y0 = net.initial / n

    def rate(s):
        y = y0 + (ode.values[-1] - y0) * s / until  # the ODE barely moves in 1e-6
        return deterministic_rates(net, y).sum()

    expected = n * quad(rate, 0.0, until)[0]
    assert abs(run.events - expected) < 6 * math.sqrt(expected) + 1e-9 * expected


def test_silence_time_is_the_time_of_the_last_infection(pairing):
    # derived: in the epidemic the last infection makes consensus and silence at once, so
    # the two times (sampled inside one batch when batching is forced) must coincide
    net = load_model(f"{MODELS}/epidemic.toml", {"n": 10**4}).network
    for seed in _seeds(11, 20):
        run = run_batched(net, until=1e3, times=[1e3], rng=seed, batch_threshold=0.0)
        assert run.status == "silent" and run.outcome.label == "I"
        assert run.end_time == run.outcome.time and run.events == 10**4 - 1
        assert tuple(run.counts[-1]) == (10**4, 0)


def test_same_seed_same_run_and_horizon_semantics():
    net = _am(10**5, 100)
    a = run_batched(net, until=5.0, rng=123)
    b = run_batched(net, until=5.0, rng=123)
    assert (a.counts == b.counts).all() and a.events == b.events
    assert a.status == "horizon" and a.end_time == 5.0
    assert (a.counts.sum(axis=1) == 10**5).all() and a.times.shape == (101,)
    assert (a.counts[0] == net.initial).all()


def test_bad_input_is_refused():
    net = Network.from_reactions("decay", ["X", "Y"], [Reaction({"X": 1}, {"Y": 1}, 1.0)],
                                 initial={"X": 5})
    with pytest.raises(ModelError, match="two-in two-out"):
        run_batched(net, until=1.0)
    with pytest.raises(ValueError, match="clock"):
        run_batched(_am(10, 0), until=1.0, clock="wall")
    with pytest.raises(ValueError, match="until"):
        run_batched(_am(10, 0), until=-1.0)
    with pytest.raises(CRNError, match="2\\*\\*60"):
        run_batched(_am(2**61, 0), until=1.0)
