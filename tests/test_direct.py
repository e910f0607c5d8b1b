"""The direct-method SSA against closed forms and an exact master-equation solution."""

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.linalg import expm
from seeds import seed
from ssa_checks import chi_square_pvalue
from ssa_reference import mass_action, net_changes, run_by_hand

from crn.core.model import parse_model
from crn.core.network import Network, Reaction, propensities
from crn.engines.direct import dependency_graph, run_direct
from crn.io.models import load_model

ALPHA = 0.001  # significance level of every goodness-of-fit test in this file

INITIATOR_ONLY = """
name = "one-way epidemic, initiator infects"
[parameters]
n = 100
[initial]
I = "1"
S = "n - 1"
[protocol]
transitions = ["I, S -> I, I"]
[output]
I = "I"
"""


def harmonic(m):
    return sum(1.0 / k for k in range(1, m + 1))


def consensus_times(net, runs, key, until=200.0):
    children = np.random.SeedSequence(seed(key)).spawn(runs)
    out = np.empty(runs)
    for i, child in enumerate(children):
        run = run_direct(net, until=until, times=[0.0], rng=child, stop_at_consensus=True)
        assert run.status == "consensus"
        out[i] = run.outcome.time
    return out


def test_epidemic_both_orders_mean_time():
    # derived: both orders infect, so from i infected the next infection takes
    # n (n-1) / (2 i (n-i)) interactions on average; summed over i that is (n-1) H_{n-1},
    # parallel time (n-1) H_{n-1} / n; within 4 standard errors of 3000 runs.
    n = 100
    net = load_model("models/epidemic.toml", {"n": n, "seeds": 1}).network
    t = consensus_times(net, 3000, key=11)
    expected = (n - 1) * harmonic(n - 1) / n
    assert abs(t.mean() - expected) < 4 * t.std(ddof=1) / math.sqrt(t.size)


def test_epidemic_initiator_only_mean_time():
    # derived: only the initiator infects, so half the infecting pairs of the both-orders
    # case remain and every wait doubles: 2 (n-1) H_{n-1} / n parallel time;
    # within 4 standard errors of 3000 runs.
    n = 100
    net = parse_model(INITIATOR_ONLY).network
    t = consensus_times(net, 3000, key=12, until=400.0)
    expected = 2 * (n - 1) * harmonic(n - 1) / n
    assert abs(t.mean() - expected) < 4 * t.std(ddof=1) / math.sqrt(t.size)


def birth_death(lam, mu, n0):
    return Network.from_reactions("birth-death", ["X"],
                                  [Reaction({}, {"X": 1}, lam), Reaction({"X": 1}, {}, mu)],
                                  initial={"X": n0})


def test_birth_death_stationary_poisson():
    # derived: 0 -> X (lambda), X -> 0 (mu x) is stationary Poisson(lambda/mu) (the
    # immigration-death chain); from X0 = 0 the law at t is Poisson((lambda/mu)(1 - e^{-mu t})),
    # at t = 15 the mean differs by e^-15 = 3.1e-7 relative. Chi-square, alpha = 0.001,
    # 3000 independent runs.
    lam, mu = 12.0, 1.0
    net = birth_death(lam, mu, 0)
    children = np.random.SeedSequence(seed(21)).spawn(3000)
    x = np.array([run_direct(net, until=15.0, times=[15.0], rng=c).counts[0, 0]
                  for c in children])
    assert chi_square_pvalue(x, lambda k: stats.poisson.pmf(k, lam / mu), 40) > ALPHA


def test_birth_death_transient_mean():
    # derived (immigration-death chain): E X(t) = n0 e^{-mu t} + (lambda/mu)(1 - e^{-mu t});
    # each sample time within 4 standard errors of 2000 runs.
    lam, mu, n0 = 5.0, 0.5, 60
    net = birth_death(lam, mu, n0)
    times = np.array([0.0, 0.5, 1.0, 2.0, 4.0])
    children = np.random.SeedSequence(seed(22)).spawn(2000)
    x = np.stack([run_direct(net, until=4.0, times=times, rng=c).counts[:, 0]
                  for c in children])
    assert (x[:, 0] == n0).all()
    for j, t in enumerate(times[1:], start=1):
        expected = n0 * math.exp(-mu * t) + lam / mu * (1 - math.exp(-mu * t))
        se = x[:, j].std(ddof=1) / math.sqrt(x.shape[0])
        assert abs(x[:, j].mean() - expected) < 4 * se


def test_pure_decay_is_binomial():
    # derived: X -> 0 at c gives X(t) ~ Binomial(X0, e^{-ct});
    # chi-square, alpha = 0.001, 3000 runs.
    x0, c, t = 40, 0.7, 1.0
    net = Network.from_reactions("decay", ["X"], [Reaction({"X": 1}, {}, c)], initial={"X": x0})
    children = np.random.SeedSequence(seed(23)).spawn(3000)
    x = np.array([run_direct(net, until=t, times=[t], rng=ch).counts[0, 0] for ch in children])
    p = math.exp(-c * t)
    assert chi_square_pvalue(x, lambda k: stats.binom.pmf(k, x0, p), x0) > ALPHA


def test_mixed_orders_match_the_master_equation():
    # derived: for one species the chemical master equation on 0..N_MAX is dp/dt = p Q with
    # Q built from our propensities (finite state projection, Munsky & Khammash 2006); the
    # mass beyond N_MAX is checked to be below 1e-9. Orders 0-3 at volume 2.5.
    # Chi-square, alpha = 0.001, 3000 runs.
    reactions = [Reaction({}, {"X": 1}, 4.0), Reaction({"X": 1}, {}, 0.2),
                 Reaction({"X": 2}, {"X": 1}, 0.3), Reaction({"X": 3}, {"X": 1}, 0.05)]
    net = Network.from_reactions("mixed", ["X"], reactions, volume=2.5, initial={"X": 25})
    n_max, t = 120, 1.5
    q = np.zeros((n_max + 1, n_max + 1))
    change = [+1, -1, -1, -2]
    for x in range(n_max + 1):
        for a, d in zip(propensities(net, [x]), change, strict=True):
            if 0 <= x + d <= n_max:
                q[x, x + d] += a
            q[x, x] -= a
    p0 = np.zeros(n_max + 1)
    p0[25] = 1.0
    pt = p0 @ expm(q * t)
    assert 1.0 - pt.sum() < 1e-9
    children = np.random.SeedSequence(seed(24)).spawn(3000)
    x = np.array([run_direct(net, until=t, times=[t], rng=ch).counts[0, 0] for ch in children])
    assert chi_square_pvalue(x, lambda k: pt[k], n_max) > ALPHA


def test_same_seed_same_run_and_sampling_semantics():
    net = load_model("models/approximate_majority.toml", {"n": 200, "gap": 10}).network
    times = np.linspace(0, 30, 7)
    a = run_direct(net, until=30.0, times=times, rng=5)
    b = run_direct(net, until=30.0, times=times, rng=np.random.default_rng(5))
    np.testing.assert_array_equal(a.counts, b.counts)
    assert a.events == b.events and a.outcome == b.outcome
    assert a.counts.shape == (7, 3)
    np.testing.assert_array_equal(a.counts[0], net.initial)
    assert (a.counts.sum(axis=1) == 200).all()  # a protocol keeps its agents
    # approximate majority falls silent at consensus: later samples repeat the last state
    assert a.status == "silent" and a.end_time < 30.0
    assert a.outcome.label == a.outcome.final_label and a.outcome.held
    assert a.outcome.time <= a.end_time


@pytest.mark.parametrize("model,params,until,stop,key", [
    ("approximate_majority", {"n": 200, "gap": 10}, 30.0, False, 301),
    ("approximate_majority", {"n": 60, "gap": 0}, 30.0, True, 302),
    ("undecided_state", {"n": 80, "gap": 4}, 20.0, True, 303),
    ("exact_majority", {"n": 40, "gap": 2}, 10.0, False, 304),
    ("epidemic", {"n": 50}, 100.0, True, 305),
    ("birth_death", {"x0": 3}, 2.0, False, 306),
])
def test_a_seeded_run_is_the_plain_python_direct_method_step_for_step(model, params, until,
                                                                      stop, key):
    """Gillespie, J. Phys. Chem. 81:2340, 1977, with the sorting search order of McCollum et
    al., Comput. Biol. Chem. 30:39, 2006, written out in plain Python (tests/ssa_reference.py)
    and fed the same seed: every sample, the event count, the end, the status and the
    outcome agree exactly. Networks under 64 reactions, where the kernel re-sums the total
    propensity at every event as the plain version does."""
    net = load_model(f"models/{model}.toml", params).network
    times = np.linspace(0.0, until, 9)
    run = run_direct(net, until=until, times=times, rng=seed(key), stop_at_consensus=stop)
    counts, first, first_time, last, events, end_time, status = run_by_hand(
        mass_action(net), net_changes(net), net.species_label, net.initial, until=until,
        times=times, seed=seed(key), stop_at_consensus=stop, sorting=True)
    np.testing.assert_array_equal(run.counts, counts)
    assert (run.events, run.end_time, run.status) == (events, end_time, status)
    assert events > 10
    label = run.outcome.label
    assert label == (net.labels[first] if first >= 0 else None)
    assert run.outcome.final_label == (net.labels[last] if last >= 0 else None)
    assert run.outcome.time == first_time or (label is None and math.isnan(first_time))


def test_stop_at_consensus_and_horizon():
    net = load_model("models/epidemic.toml", {"n": 50, "seeds": 1}).network
    run = run_direct(net, until=100.0, rng=1, stop_at_consensus=True)
    assert run.status == "consensus" and run.end_time == run.outcome.time
    assert run.events == 49  # derived: each event infects one of the 49 susceptibles
    short = run_direct(net, until=1e-3, times=[0.0, 1e-3], rng=1)
    assert short.status == "horizon" and short.end_time == 1e-3
    assert short.outcome.label is None


def test_huge_counts_do_not_overflow():
    # n = 1e9: propensities ~ 1e9 in float64, counts int64; the run keeps the population.
    net = load_model("models/approximate_majority.toml", {"n": 10**9, "gap": 0}).network
    run = run_direct(net, until=2e-4, times=[0.0, 2e-4], rng=seed(3))
    assert run.counts[-1].sum() == 10**9
    # derived: total propensity 2 x y / (n - 1) = n / 2 at x = y = n / 2, nearly constant over
    # so short a time, so the events are Poisson with mean (n / 2) t = 1e5; 6 standard deviations
    assert abs(run.events - 1e5) < 6 * math.sqrt(1e5)


def test_dependency_graph():
    # X + Y -> 2 Y changes X and Y: affects every reaction reading X or Y; Z -> 0 only itself.
    net = Network.from_reactions(
        "g", ["X", "Y", "Z"],
        [Reaction({"X": 1, "Y": 1}, {"Y": 2}, 1.0), Reaction({"Y": 1}, {"Z": 1}, 1.0),
         Reaction({"Z": 1}, {}, 1.0), Reaction({}, {"X": 1}, 1.0)],
        initial={"X": 1})
    ptr, idx = dependency_graph(net)
    affected = [set(idx[ptr[i]:ptr[i + 1]].tolist()) for i in range(4)]
    assert affected == [{0, 1}, {0, 1, 2}, {2}, {0}]


def test_bad_horizon_is_refused():
    net = birth_death(1.0, 1.0, 0)
    with pytest.raises(ValueError, match="until"):
        run_direct(net, until=float("inf"), rng=1)
    with pytest.raises(ValueError, match="times"):
        run_direct(net, until=1.0, times=[0.5, 0.2], rng=1)


def test_many_reactions_use_the_incremental_total():
    # 80 independent decays X_i -> 0 (more reactions than the kernel re-sums at every event,
    # so the total propensity is kept incrementally): every X_i(t) ~ Binomial(20, e^{-ct})
    # (derived: pure decay, each molecule independently); the 80 x 300 counts pooled,
    # chi-square, alpha = 0.001.
    k, x0, c, t = 80, 20, 0.7, 1.0
    names = [f"X{i}" for i in range(k)]
    net = Network.from_reactions("decays", names, [Reaction({s: 1}, {}, c) for s in names],
                                 initial={s: x0 for s in names})
    children = np.random.SeedSequence(seed(25)).spawn(300)
    x = np.concatenate([run_direct(net, until=t, times=[t], rng=ch).counts[0] for ch in children])
    p = math.exp(-c * t)
    assert chi_square_pvalue(x, lambda j: stats.binom.pmf(j, x0, p), x0) > ALPHA
    done = run_direct(net, until=1e3, times=[1e3], rng=1)
    assert done.status == "silent" and done.events == k * x0 and done.counts.sum() == 0


def _scipy_tables(net):
    """The dependency graph and change lists as sparse products (how they were first built)."""
    import scipy.sparse as sp

    changed = (net.stoichiometry != 0).astype(np.int64)
    uses = (net.reactant_matrix != 0).astype(np.int64)
    dep = sp.csr_matrix(changed.T @ uses)
    dep.sort_indices()
    st = sp.csc_matrix(net.stoichiometry)
    st.sort_indices()
    return (dep.indptr, dep.indices, st.indptr, st.indices, np.rint(st.data))


@pytest.mark.parametrize("model", ["approximate_majority.toml", "birth_death.toml",
                                   "cancel_spread.toml", "droplet_assay.toml", "epidemic.toml",
                                   "exact_majority.toml", "undecided_state.toml", "voter.toml",
                                   "exact_majority_records.py"])
@pytest.mark.parametrize("compiled", [False, True])
def test_compiled_tables_equal_the_sparse_products(model, compiled, monkeypatch):
    import crn.engines.direct as direct_module
    from crn.engines.direct import _changes

    # small networks take the kernels' Python versions; force either
    monkeypatch.setattr(direct_module, "_PYTHON_TABLES_UP_TO", -1 if compiled else 10**9)

    net = load_model(Path(__file__).resolve().parent.parent / "models" / model).network
    dep_ptr, dep_idx = dependency_graph(net)
    ch_ptr, ch_sp, ch_d = _changes(net)
    ref = _scipy_tables(net)
    for ours, theirs in zip((dep_ptr, dep_idx, ch_ptr, ch_sp, ch_d), ref, strict=True):
        assert ours.dtype == np.int64
        assert np.array_equal(ours, np.asarray(theirs, dtype=np.int64))
