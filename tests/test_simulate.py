"""Ensembles: reproducible from the seed on any number of workers and on a Dask cluster."""

import math

import numpy as np
import pytest
from seeds import seed
from ssa_checks import two_sample_chi_square_pvalue

from crn.core.errors import CRNError
from crn.io.models import load_model
from crn.solvers.simulate import (
    AUTO_BATCHED_FROM,
    SimulationInterrupted,
    choose_engine,
    default_horizon,
    simulate,
)

ALPHA = 0.001


@pytest.fixture(scope="module")
def am_net():
    return load_model("models/approximate_majority.toml", {"n": 120, "gap": 4}).network


def assert_same(a, b):
    assert a.labels == b.labels and a.final_labels == b.final_labels
    np.testing.assert_array_equal(a.consensus_times, b.consensus_times)
    np.testing.assert_array_equal(a.counts, b.counts)
    np.testing.assert_array_equal(a.events, b.events)
    assert a.seed_entropy == b.seed_entropy and a.engine == b.engine


def test_same_seed_same_ensemble(am_net):
    # 1 against 2 local workers is checked on the JSON in test_cli_ssa.py
    one = simulate(am_net, runs=40, rng=99, workers=1)
    assert_same(one, simulate(am_net, runs=40, rng=np.random.SeedSequence(99), workers=1))
    assert one.runs == 40 and one.complete
    assert one.counts.shape == (40, 101, 3)
    again = simulate(am_net, runs=40, rng=one.seed_entropy, workers=1)
    assert_same(one, again)
    other = simulate(am_net, runs=40, rng=100, workers=1)
    assert other.labels != one.labels or not np.array_equal(other.consensus_times,
                                                            one.consensus_times)


def test_same_seed_same_ensemble_on_a_dask_cluster(am_net):
    from distributed import LocalCluster

    local = simulate(am_net, runs=30, rng=7, workers=1)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp",
                      host="127.0.0.1", dashboard_address=None) as cluster:
        remote = simulate(am_net, runs=30, rng=7, cluster=cluster.scheduler_address)
    assert_same(local, remote)


def test_unreachable_cluster_is_a_crn_error(am_net):
    with pytest.raises(CRNError, match="Dask scheduler"):
        simulate(am_net, runs=2, rng=1, cluster="tcp://127.0.0.1:9")


def test_outcomes_summary_and_progress(am_net):
    seen = []
    ens = simulate(am_net, runs=25, rng=3, workers=1, progress=lambda d, t: seen.append((d, t)))
    assert seen == [(i, 25) for i in range(1, 26)]
    out = ens.outcomes()
    assert sum(out.values()) == 25 and "none" in out
    summary = ens.consensus_time_summary()
    finite = ens.consensus_times[np.isfinite(ens.consensus_times)]
    assert summary["median"] == pytest.approx(np.median(finite))
    assert summary["q05"] <= summary["median"] <= summary["q95"]


def test_keyboard_interrupt_keeps_finished_runs(am_net):
    def stop_after_three(done, total):
        if done == 3:
            raise KeyboardInterrupt

    with pytest.raises(SimulationInterrupted) as info:
        simulate(am_net, runs=10, rng=4, workers=1, progress=stop_after_three)
    partial = info.value.ensemble
    assert partial.runs == 3 and partial.requested == 10 and not partial.complete
    full = simulate(am_net, runs=10, rng=4, workers=1)
    np.testing.assert_array_equal(partial.counts, full.counts[:3])


def test_engine_choice_and_horizon(am_net):
    assert choose_engine(am_net) == "direct"
    with pytest.raises(CRNError, match="unknown engine"):
        choose_engine(am_net, "fast")
    # documented rule: batched for a protocol from AUTO_BATCHED_FROM = 100,000 agents on
    big = am_net.with_initial({"X": AUTO_BATCHED_FROM // 2, "Y": AUTO_BATCHED_FROM // 2})
    assert AUTO_BATCHED_FROM == 100_000 and big.population == AUTO_BATCHED_FROM
    assert choose_engine(big) == "batched"
    below = am_net.with_initial({"X": AUTO_BATCHED_FROM // 2, "Y": AUTO_BATCHED_FROM // 2 - 1})
    assert choose_engine(below) == "direct"
    # documented rule: 20 (1 + ln n) parallel time for a protocol
    assert default_horizon(am_net) == pytest.approx(20 * (1 + math.log(120)))
    with pytest.raises(ValueError, match="runs"):
        simulate(am_net, runs=0)


def test_direct_and_reference_engines_agree_in_distribution():
    # Same network, two independent SSA implementations (ours; GillesPy2's pure-Python
    # solver): counts of X at t = 2 compared by a two-sample chi-square test, alpha = 0.001.
    from crn.engines.gillespy2_bridge import run_reference

    net = load_model("models/approximate_majority.toml", {"n": 40, "gap": 4}).network
    times = [0.0, 1.0, 2.0]
    x = net.index["X"]
    ours = simulate(net, runs=400, until=2.0, times=times, engine="direct", rng=seed(31), workers=1)
    ref = np.array([run_reference(net, until=2.0, times=times, rng=child,
                                  solver="numpy").counts[-1, x]
                    for child in np.random.SeedSequence(seed(32)).spawn(400)])
    assert two_sample_chi_square_pvalue(ours.counts[:, -1, x], ref) > ALPHA


def test_direct_and_batched_engines_agree_in_distribution():
    # Two exact engines on one protocol (approximate majority, n = 1000, gap 20), 600 runs each:
    # two-sample Kolmogorov-Smirnov on first-consensus times, chi-square on the count of X at
    # parallel time 3 and on the winning labels; each at alpha = 0.001.
    from scipy import stats

    net = load_model("models/approximate_majority.toml", {"n": 1000, "gap": 20}).network
    common = dict(runs=600, until=80.0, times=[0.0, 3.0], workers=1)
    direct = simulate(net, engine="direct", rng=seed(41), **common)
    batched = simulate(net, engine="batched", rng=seed(42), **common)
    assert batched.engine == "batched"
    assert direct.outcomes()["none"] == 0 and batched.outcomes()["none"] == 0
    assert stats.ks_2samp(direct.consensus_times, batched.consensus_times).pvalue > ALPHA
    x = net.index["X"]
    assert two_sample_chi_square_pvalue(direct.counts[:, -1, x],
                                        batched.counts[:, -1, x]) > ALPHA
    table = [[direct.outcomes().get(k, 0) for k in ("X", "Y")],
             [batched.outcomes().get(k, 0) for k in ("X", "Y")]]
    assert stats.chi2_contingency(table).pvalue > ALPHA
