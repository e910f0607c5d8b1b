"""The batched engine against exact laws: small chains, the epidemic, Kurtz, the direct method."""

import itertools
import math

import numpy as np
import pytest
from scipy import stats
from scipy.linalg import expm
from seeds import seed

import crn.engines.batched as batched_module
from crn.core.errors import CRNError, ModelError
from crn.core.network import Network, Reaction, propensities
from crn.core.protocol import Outcome, Protocol
from crn.core.translate import protocol_to_network
from crn.engines.batched import _collision_free_length, protocol_tables, run_batched
from crn.io.models import load_model

ALPHA = 0.001  # significance of every statistical test in this file
MODELS = "models"


def _am(n, gap):
    return load_model(f"{MODELS}/approximate_majority.toml", {"n": n, "gap": gap}).network


def _seeds(key, runs):
    """Child streams of the test stream ``key`` (under the suite's seed root, tests/seeds.py)."""
    return np.random.SeedSequence(seed(key)).spawn(runs)


def _generator(net):
    """Generator of the network's Markov chain on counts (the propensities of docs/design.md)."""
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
        x = draws(np.random.default_rng(seed(n)), n, cap, 40_000)
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
    for child in _seeds(1, 4000):
        run = run_batched(net, until=until, times=[until], rng=child, batch_threshold=0.0)
        observed[index[tuple(run.counts[0])]] += 1
    assert _chi_square(observed, exact) > ALPHA


def test_discrete_clock_matches_the_embedded_chain(pairing):
    # exact: the protocol's one-interaction transition matrix to the power K (docs/design.md:
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
    for child in _seeds(2, 4000):
        run = run_batched(net, until=0.75, times=[0.75], rng=child, clock="discrete",
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
        for child in _seeds(root, 3000):
            run = run_batched(net, until=grid[-1], times=[grid[-1]], rng=child,
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
    # derived: (n-1) H_{n-1} / n with both orders infecting (from i infected the next
    # infection takes n (n-1) / (2 i (n-i)) interactions; sum over i, divide by n), twice
    # that when only the initiator infects; 4 standard errors of the mean of R runs
    n, runs = 10**6, 120
    if both_orders:
        net = load_model(f"{MODELS}/epidemic.toml", {"n": n}).network
        expected = (n - 1) * _harmonic(n - 1) / n
    else:
        protocol = Protocol("one-way epidemic", ("I", "S"), {("I", "S"): (Outcome("I", "I"),)},
                            {"I": 1, "S": n - 1}, {"I": "I"})
        net = protocol_to_network(protocol)
        expected = 2 * (n - 1) * _harmonic(n - 1) / n
    times = np.array([run_batched(net, until=math.inf, rng=child, stop_at_consensus=True)
                      .outcome.time for child in _seeds(5 + both_orders, runs)])
    assert abs(times.mean() - expected) < 4 * times.std(ddof=1) / math.sqrt(runs)


def _linear_noise(net, times):
    """Mean and linear-noise covariance of ``x / n`` at ``times`` (van Kampen's expansion).

    derived (van Kampen, Stochastic Processes in Physics and Chemistry, 3rd ed., Elsevier
    2007, ch. X, the linear noise approximation; Kurtz, J. Appl. Prob. 8:344, 1971, for the
    central limit theorem behind it): reaction R fires at rate
    ``lam_R = n**r / v**(r-1) * a_R(y)`` with ``a_R(y) = k_R prod y**reactants`` (order r,
    volume v) and moves ``y = x / n`` by ``nu_R / n``. To first order in ``n**-1/2`` the
    mean follows ``y' = sum_R lam_R nu_R / n`` and the covariance, zero at a fixed start,
    follows ``C' = J C + C J^T + sum_R lam_R nu_R nu_R^T / n**2`` with ``J`` the Jacobian of
    the mean's right-hand side. Written here from the network's arrays, apart from crn.solvers.ode.
    """
    from scipy.integrate import solve_ivp

    n, s = net.population, net.n_species
    nu = net.stoichiometry.toarray()
    r = net.reactant_matrix.toarray()
    order = r.sum(axis=0)
    scale = net.rates * n**order / net.volume ** (order - 1) / n  # lam_R / n per unit a_R / k_R

    def lam(y):
        return scale * np.prod(y[:, None] ** r, axis=0)

    def dlam(y):  # d lam_R / d y_s, shape (n_reactions, n_species)
        out = np.empty((r.shape[1], s))
        for j in range(s):
            lowered = r.copy()
            lowered[j] = np.maximum(lowered[j] - 1, 0)
            out[:, j] = scale * r[j] * np.prod(y[:, None] ** lowered, axis=0)
        return out

    def rhs(_t, z):
        y, c = z[:s], z[s:].reshape(s, s)
        jac = nu @ dlam(y)
        diffusion = (nu * lam(y)) @ nu.T / n
        return np.concatenate([nu @ lam(y), (jac @ c + c @ jac.T + diffusion).ravel()])

    z0 = np.concatenate([net.initial / n, np.zeros(s * s)])
    sol = solve_ivp(rhs, (0.0, times[-1]), z0, t_eval=times, method="LSODA", rtol=1e-10,
                    atol=1e-14)
    mean = sol.y[:s].T
    var = np.stack([np.diag(sol.y[s:, i].reshape(s, s)) for i in range(len(times))])
    return mean, var


def _worst_z(net, ode, var, times, seeds):
    """Largest |x/n - ODE| / linear-noise sd over runs, sample times after 0 and species."""
    n = net.population
    worst = 0.0
    for child in seeds:
        run = run_batched(net, until=times[-1], times=times, rng=child)
        assert run.outcome.label is None  # all sample times are before consensus
        assert (run.counts[0] == net.initial).all()
        z = np.abs(run.counts[1:] / n - ode[1:]) / np.sqrt(var[1:])
        worst = max(worst, float(z.max()))
    return worst


def _mean_field_check(n=10**8, runs=4):
    """The network, sample times, the ODE, the linear-noise variance and the z bound.

    Bonferroni over the ``runs * 12 * 3`` comparisons (run, sample time, species), each
    two-sided at ``ALPHA / comparisons``: the whole check fails a correct engine with
    probability at most ALPHA (the LNA being exact to first order at this n).
    """
    from crn.solvers.ode import solve_mean_field

    net = _am(n, 0).with_initial({"X": n // 2, "Y": 2 * n // 5, "B": n // 10})
    times = np.linspace(0.0, 6.0, 13)
    ode = solve_mean_field(net, times=times, stop_at_consensus=False).values
    mean, var = _linear_noise(net, times)
    # the network's own mean field and the one integrated beside the covariance agree
    assert np.abs(mean - ode).max() < 1e-6
    comparisons = runs * (len(times) - 1) * net.n_species
    return net, times, ode, var, stats.norm.isf(ALPHA / (2 * comparisons))


def test_kurtz_batched_runs_follow_the_ode_with_linear_noise_spread():
    # Kurtz 1970/1972: x/n -> the ODE; van Kampen's linear noise approximation gives the
    # spread (see _linear_noise): sd of X/n grows to about 2.5 / sqrt(n) by t = 6 here.
    # Tolerance: Bonferroni-corrected normal quantile (_mean_field_check), overall ALPHA.
    net, times, ode, var, bound = _mean_field_check()
    assert 2.0 < math.sqrt(var[-1, 0] * net.population) < 3.0  # the spread quoted above
    assert _worst_z(net, ode, var, times, _seeds(7, 4)) < bound


@pytest.mark.parametrize("reaction", range(4))
def test_mean_field_check_detects_a_one_percent_rate_error(reaction):
    # derived: running a network with one rate constant 1% off moves X/n, Y/n or B/n away
    # from the true ODE by at least 6.5e-3 by t = 6 (each of the four reactions; computed
    # from the two ODEs), 27 to 50 linear-noise sd at n = 1e8, far beyond the 4.5 sd bound:
    # the check above fails such an engine (with probability ~1 for any seed)
    from crn.solvers.ode import solve_mean_field

    net, times, ode, var, bound = _mean_field_check()
    rates = np.array(net.rates, dtype=float)
    rates[reaction] *= 1.01
    wrong = net.with_rates(rates)
    moved = solve_mean_field(wrong, times=times, stop_at_consensus=False).values
    assert np.abs(moved - ode).max() > 6e-3
    assert _worst_z(wrong, ode, var, times, _seeds(70 + reaction, 1)) > bound


@pytest.mark.slow
def test_batched_ensemble_has_the_linear_noise_mean_and_variance():
    # The long version of the mean-field check (the fast one above covers the same code):
    # 1000 runs at n = 1e6 from (0.5, 0.4, 0.1); at each of the 12 sample times the mean of
    # X/n must lie within the Bonferroni normal bound of the ODE (sd from _linear_noise over
    # sqrt(runs)), and the sample variance must pass the two-sided chi-square test
    # (runs - 1) s^2 / var ~ chi2(runs - 1) against the linear-noise variance; 24 tests,
    # overall level ALPHA. derived: the next-order corrections are O(1/n) relative.
    from crn.solvers.ode import solve_mean_field

    n, runs = 10**6, 1000
    net = _am(n, 0).with_initial({"X": n // 2, "Y": 2 * n // 5, "B": n // 10})
    times = np.linspace(0.0, 6.0, 13)
    ode = solve_mean_field(net, times=times, stop_at_consensus=False).values
    _, var = _linear_noise(net, times)
    x = np.array([run_batched(net, until=times[-1], times=times, rng=child).counts[1:, 0] / n
                  for child in _seeds(77, runs)])
    tests = 2 * (len(times) - 1)
    z = stats.norm.isf(ALPHA / (2 * tests))
    assert (np.abs(x.mean(axis=0) - ode[1:, 0]) < z * np.sqrt(var[1:, 0] / runs)).all()
    ratio = (runs - 1) * x.var(axis=0, ddof=1) / var[1:, 0]
    low = stats.chi2.ppf(ALPHA / (2 * tests), runs - 1)
    high = stats.chi2.isf(ALPHA / (2 * tests), runs - 1)
    assert ((low < ratio) & (ratio < high)).all(), ratio / (runs - 1)


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

    from crn.core.network import deterministic_rates
    from crn.solvers.ode import solve_mean_field

    n = 2**60
    net = _am(n, 0).with_initial({"X": n // 2, "Y": 3 * n // 8, "B": n // 8})
    until = 1e-6
    run = run_batched(net, until=until, times=[until], rng=seed(10))
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
    for child in _seeds(11, 20):
        run = run_batched(net, until=1e3, times=[1e3], rng=child, batch_threshold=0.0)
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
