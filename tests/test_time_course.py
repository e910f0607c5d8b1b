"""Time courses: sampling, the run-by-run reduction, and stochastic moments against exact ones."""

import math
import tracemalloc

import numpy as np
import pytest
import scipy.sparse.linalg as spla
from scipy.linalg import expm

from crn.core.network import Network, Reaction
from crn.solvers.configurations import enumerate_configurations
from crn.solvers.ode import solve_mean_field
from crn.solvers.simulate import simulate
from crn.solvers.time_course import (
    TimeCourse,
    TimeCourseAccumulator,
    quantile_rank_error,
    reduction_memory,
    sample_times,
    time_course_of_counts,
)

R = 10_000  # runs per moment check


def ensemble_course(net, times, seed, runs=R, **kwargs):
    acc = TimeCourseAccumulator(times, net.species, runs, rng=np.random.SeedSequence(seed))
    if "cluster" not in kwargs:
        kwargs.setdefault("workers", 1)
    simulate(net, runs=runs, until=float(times[-1]), times=times, engine="direct",
             rng=np.random.SeedSequence(seed), reduce=acc, **kwargs)
    return acc.result()


def assert_moments(course, species, mu, var):
    """The acceptance rule of the DSMTS stochastic-simulator test suite (Evans, Gillespie,
    Wilkinson, "The SBML discrete stochastic models test suite", Bioinformatics 24:285, 2008;
    from memory):
    at every sample time Z = sqrt(R) (mean - mu) / sigma in (-3, 3) and
    Y = sqrt(R / 2) (S^2 / sigma^2 - 1) in (-5, 5). Times where the exact variance is 0
    (the start) must match exactly."""
    r = course.runs
    mean, sd = course.column("mean", species), course.column("sd", species)
    for t, m, s, mu_t, var_t in zip(course.times, mean, sd, mu, var, strict=True):
        if var_t == 0:
            assert m == pytest.approx(mu_t, abs=1e-12) and s == pytest.approx(0, abs=1e-12)
            continue
        z = math.sqrt(r) * (m - mu_t) / math.sqrt(var_t)
        y = math.sqrt(r / 2) * (s**2 / var_t - 1)
        assert -3 < z < 3, (t, m, mu_t, z)
        assert -5 < y < 5, (t, s**2, var_t, y)


def test_sample_times_grid_and_horizon():
    np.testing.assert_allclose(sample_times(0.5, 2.0), [0, 0.5, 1, 1.5, 2])
    np.testing.assert_allclose(sample_times(0.3, 1.0), [0, 0.3, 0.6, 0.9, 1.0])
    assert sample_times(0.1, 1.0).size == 11  # 10 * 0.1 rounds below 1.0 but counts
    assert sample_times(1.0, 1.0).tolist() == [0.0, 1.0]


@pytest.mark.parametrize("every, until, match", [
    (3.0, 2.0, "longer than the horizon"), (0.0, 1.0, "positive"), (-1.0, 1.0, "positive"),
    (math.nan, 1.0, "positive"), (0.1, math.inf, "horizon"),
    (1e-7, 1.0, "10000001 sample times, more than the limit 1000000"),
    (1e-300, 1e10, "far more than can be recorded"),
])
def test_sample_times_refuses_bad_intervals(every, until, match):
    with pytest.raises(ValueError, match=match):
        sample_times(every, until)


def test_sample_limit_can_be_forced():
    assert sample_times(1e-6, 1.1, force=True).size == 1_100_001


def test_reduction_is_the_sample_moments_in_any_arrival_order():
    rng = np.random.default_rng(11)
    counts = rng.poisson(30, size=(200, 7, 3))
    times = np.arange(7.0)
    in_order = time_course_of_counts(times, counts, ("A", "B", "C"))
    acc = TimeCourseAccumulator(times, ("A", "B", "C"), 200)
    for r in rng.permutation(200):
        acc.add(r, counts[r])
    shuffled = acc.result()
    for name in ("mean", "sd", "q05", "q95"):  # bit for bit: the same operations in run order
        np.testing.assert_array_equal(getattr(in_order, name), getattr(shuffled, name))
    # common practice: numpy's two-pass mean and n-1 standard deviation, linear quantiles
    np.testing.assert_allclose(in_order.mean, counts.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(in_order.sd, counts.std(axis=0, ddof=1), rtol=1e-10)
    np.testing.assert_array_equal(in_order.q05, np.quantile(counts, 0.05, axis=0))
    np.testing.assert_array_equal(in_order.q95, np.quantile(counts, 0.95, axis=0))
    assert in_order.runs == in_order.quantile_runs == 200


def test_missing_runs_after_an_interruption_are_skipped():
    counts = np.arange(5 * 2 * 1).reshape(5, 2, 1)
    acc = TimeCourseAccumulator([0.0, 1.0], ("X",), 5)
    for r in (0, 2, 4):
        acc.add(r, counts[r])
    course = acc.result()
    assert course.runs == 3
    np.testing.assert_allclose(course.mean[:, 0], counts[[0, 2, 4], :, 0].mean(axis=0))


def test_memory_stays_bounded_and_sampled_quantiles_are_within_the_dkw_bound():
    runs, n_times, n_species = 2000, 500, 10  # 80 MB if every run were kept
    budget = 4 * 2**20
    times = np.arange(n_times, dtype=float)

    def run(r):
        return np.random.default_rng([5, r]).integers(0, 100, size=(n_times, n_species))

    acc = TimeCourseAccumulator(times, [f"S{i}" for i in range(n_species)], runs, rng=9,
                                quantile_memory=budget)
    tracemalloc.start()
    for r in range(runs):
        acc.add(r, run(r))
    course = acc.result()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 8 * budget  # kept runs + moments + one block of quantile work, not runs x size
    bound = reduction_memory(n_times, n_species, runs, quantile_memory=budget)
    assert budget <= bound < budget + 7 * n_times * n_species * 8
    kept = course.quantile_runs
    assert kept == budget // (n_times * n_species * 8) < runs
    # every run's value in a few cells: the reported quantile's rank among all runs is within
    # the DKW-Massart bound (95% each; the cells are fixed by the seed, not tuned)
    eps = quantile_rank_error(kept)
    cells = [(0, 0), (250, 3), (499, 9)]
    values = np.array([[run(r)[t, s] for t, s in cells] for r in range(runs)])
    for j, (t, s) in enumerate(cells):
        below = np.mean(values[:, j] < course.q05[t, s])
        at_most = np.mean(values[:, j] <= course.q05[t, s])
        assert below - eps <= 0.05 <= at_most + eps
    np.testing.assert_allclose(course.mean[[c[0] for c in cells], [c[1] for c in cells]],
                               values.mean(axis=0), rtol=1e-12)


def test_birth_death_moments():
    """Linear birth-death X -> 2X (lambda X), X -> 0 (mu X) from X0: mean
    X0 e^{(lambda-mu) t}, variance X0 (lambda+mu)/(lambda-mu) e^{(lambda-mu)t}(e^{(lambda-mu)t}-1)
    (Bailey, "The Elements of Stochastic Processes", Wiley 1964, chapter 8; section from
    memory)."""
    lam, mu, x0 = 1.0, 1.1, 40
    net = Network.from_reactions("birth-death", ["X"], [Reaction({"X": 1}, {"X": 2}, lam),
                                                       Reaction({"X": 1}, {}, mu)],
                                 initial={"X": x0})
    times = sample_times(0.5, 4.0)
    course = ensemble_course(net, times, seed=2024)
    g = np.exp((lam - mu) * times)
    assert_moments(course, "X", x0 * g, x0 * (lam + mu) / (lam - mu) * g * (g - 1))


def test_immigration_death_is_poisson():
    """0 -> X (alpha), X -> 0 (mu X) from zero: X(t) is Poisson with mean
    (alpha / mu)(1 - e^{-mu t}) (derived: each molecule made at time s < t is still there
    with probability e^{-mu (t - s)}, so the count is a thinned Poisson process)."""
    alpha, mu = 12.0, 0.5
    net = Network.from_reactions("immigration-death", ["X"], [Reaction({}, {"X": 1}, alpha),
                                                             Reaction({"X": 1}, {}, mu)])
    times = sample_times(1.0, 8.0)
    course = ensemble_course(net, times, seed=77)
    mean = alpha / mu * (1 - np.exp(-mu * times))
    assert_moments(course, "X", mean, mean)


def test_dimerisation_against_the_exact_chain():
    """2P <-> P2 (project convention: propensity k1 P (P - 1) / V): mean and variance of P from
    the master equation solved exactly on the enumerated chain (derived: p(t) = p0 exp(Q t),
    Al-Mohy and Higham's expm_multiply)."""
    k1, k2, v = 0.02, 0.3, 1.0
    net = Network.from_reactions("dimerisation", ["P", "P2"],
                                 [Reaction({"P": 2}, {"P2": 1}, k1),
                                  Reaction({"P2": 1}, {"P": 2}, k2)],
                                 volume=v, initial={"P": 60, "P2": 0})
    times = sample_times(0.25, 3.0)
    space = enumerate_configurations(net)
    assert space.complete
    forward = space.generator().T.tocsc()
    p0 = np.zeros(space.n_states)
    p0[0] = 1.0
    dist = spla.expm_multiply(forward, p0, start=0.0, stop=float(times[-1]),
                              num=times.size, endpoint=True)
    x = space.states[:, 0].astype(float)
    mu = dist @ x
    var = dist @ x**2 - mu**2
    var[0] = 0.0
    course = ensemble_course(net, times, seed=31)
    assert_moments(course, "P", mu, var)


def test_same_time_course_on_a_pool_and_a_dask_cluster():
    from distributed import LocalCluster

    net = Network.from_reactions("birth-death", ["X"], [Reaction({"X": 1}, {"X": 2}, 1.0),
                                                       Reaction({"X": 1}, {}, 1.1)],
                                 initial={"X": 15})
    times = sample_times(0.5, 2.0)
    one = ensemble_course(net, times, seed=8, runs=300, workers=1)
    pool = ensemble_course(net, times, seed=8, runs=300, workers=2)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp",
                      host="127.0.0.1", dashboard_address=None) as cluster:
        remote = ensemble_course(net, times, seed=8, runs=300,
                                 cluster=cluster.scheduler_address)
    for other in (pool, remote):
        for name in ("mean", "sd", "q05", "q95"):
            np.testing.assert_array_equal(getattr(one, name), getattr(other, name))


def test_reduced_ensemble_keeps_only_final_counts():
    net = Network.from_reactions("decay", ["X"], [Reaction({"X": 1}, {}, 1.0)],
                                 initial={"X": 10})
    times = sample_times(0.5, 2.0)
    acc = TimeCourseAccumulator(times, net.species, 20, rng=1)
    ens = simulate(net, runs=20, until=2.0, times=times, rng=1, workers=1, reduce=acc)
    full = simulate(net, runs=20, until=2.0, times=times, rng=1, workers=1)
    assert ens.counts.shape == (20, 1, 1)
    np.testing.assert_array_equal(ens.counts[:, 0], full.counts[:, -1])
    np.testing.assert_allclose(acc.result().mean, full.counts.mean(axis=0), rtol=1e-12)


def test_ode_time_course_of_a_linear_network_matches_the_matrix_exponential():
    """Linear network 0 -> A (k0), A -> B (k1), B -> A (k2), B -> C (k3): the mean-field ODE
    dc/dt = K c + b is solved exactly by the exponential of the augmented matrix
    [[K, b], [0, 0]] (derived; scipy.linalg.expm, Al-Mohy and Higham 2009)."""
    k0, k1, k2, k3, v = 0.7, 1.3, 0.4, 0.9, 5.0
    net = Network.from_reactions("linear", ["A", "B", "C"], [
        Reaction({}, {"A": 1}, k0), Reaction({"A": 1}, {"B": 1}, k1),
        Reaction({"B": 1}, {"A": 1}, k2), Reaction({"B": 1}, {"C": 1}, k3)],
        volume=v, initial={"A": 20, "B": 5, "C": 0})
    times = sample_times(0.25, 6.0)
    result = solve_mean_field(net, times=times, until=6.0, stop_at_consensus=False)
    course = TimeCourse.from_mean_field(result)
    m = np.array([[-k1, k2, 0, k0], [k1, -k2 - k3, 0, 0], [0, k3, 0, 0], [0, 0, 0, 0]])
    c0 = np.array([20 / v, 5 / v, 0.0, 1.0])
    exact = np.array([expm(m * t) @ c0 for t in times])[:, :3]
    np.testing.assert_allclose(course.mean, exact, atol=1e-8, rtol=0)
    counts = TimeCourse.from_mean_field(result, counts=True)
    np.testing.assert_allclose(counts.mean, exact * v, atol=1e-8 * v, rtol=0)
    assert course.units == "concentration" and counts.units == "count"
    assert course.to_json().keys() >= {"times", "mean"} and "sd" not in course.to_json()


def test_json_round_trip_for_later_reports():
    import json

    counts = np.random.default_rng(3).poisson(5, size=(7, 4, 2))
    course = time_course_of_counts(np.arange(4.0), counts[:1], ("A", "B"))  # sd is NaN
    back = TimeCourse.from_json(json.loads(json.dumps(course.to_json())))
    for name in ("mean", "sd", "q05", "q95"):
        np.testing.assert_array_equal(getattr(back, name), getattr(course, name))
    assert (back.runs, back.species, back.source) == (1, ("A", "B"), "ssa")
    with pytest.raises(ValueError, match="times"):
        TimeCourse.from_json({"mean": {"A": [1.0]}})
