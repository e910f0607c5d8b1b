"""A worker killed mid-ensemble (SIGKILL) costs nothing: its runs are rerun on their own
child streams and the ensemble is the one an undisturbed run gives; a pool that cannot
recover ends with a one-line error, exit 1, and the finished runs saved."""

import multiprocessing
import os
import signal

import numpy as np
import pytest

import crn.solvers.simulate
from crn.cli import main
from crn.io.models import load_model
from crn.solvers.simulate import simulate

AM = "models/approximate_majority.toml"


@pytest.fixture(scope="module")
def net():
    return load_model(AM, {"n": 150, "gap": 6}).network


def same(a, b):
    assert a.runs == b.runs == a.requested
    assert a.labels == b.labels
    np.testing.assert_array_equal(a.consensus_times, b.consensus_times)
    np.testing.assert_array_equal(a.counts, b.counts)
    np.testing.assert_array_equal(a.events, b.events)


def killer(pids):
    """A progress callback that SIGKILLs one worker at the first report (mid-ensemble)."""
    killed = []

    def progress(done, total):
        if not killed and done < total:
            victim = pids()[0]
            os.kill(victim, signal.SIGKILL)
            killed.append(victim)

    return progress, killed


def test_local_worker_killed_mid_ensemble_gives_the_same_ensemble(net):
    reference = simulate(net, runs=240, rng=21, workers=1, stop_at_consensus=True)
    progress, killed = killer(lambda: [p.pid for p in multiprocessing.active_children()
                                       if p.name.startswith("SpawnProcess")])
    with pytest.warns(RuntimeWarning, match="worker process died"):
        faulted = simulate(net, runs=240, rng=21, workers=2, stop_at_consensus=True,
                           progress=progress)
    assert len(killed) == 1
    same(faulted, reference)


def test_pool_that_keeps_dying_exits_1_with_the_finished_runs_saved(tmp_path, monkeypatch,
                                                                    capsys):
    # the worker running run 37 kills itself every time, so the pool cannot recover
    monkeypatch.setenv(crn.solvers.simulate.KILL_WORKER_HOOK, "37")
    monkeypatch.setattr(crn.solvers.simulate, "POOL_RESTARTS", 1)
    out = tmp_path / "runs.csv"
    code = main(["ssa", AM, "--set", "n=60", "--set", "gap=4", "--runs", "200", "--workers",
                 "2", "--seed", "3", "--csv", str(out)])
    err = capsys.readouterr().err
    assert code == 1
    message = [line for line in err.splitlines()
               if line.startswith("crn: ") and not line.startswith("crn: warning:")]
    assert len(message) == 1 and "worker processes died 2 times" in message[0], err
    assert "Traceback" not in err
    lines = out.read_text().splitlines()
    finished = len(lines) - 2  # the partial line and the header
    assert 0 < finished < 200
    assert lines[0].startswith(f"# partial: {finished} of 200 runs (worker processes died)")
    assert "37" not in [row.split(",")[0] for row in lines[2:]]
    assert [p.name for p in tmp_path.iterdir()] == ["runs.csv"]


def test_dask_worker_killed_mid_ensemble_gives_the_same_ensemble(net):
    from distributed import Client, LocalCluster

    reference = simulate(net, runs=160, rng=22, workers=1, stop_at_consensus=True)
    # a scheduler and two worker processes on the loopback interface only
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, protocol="tcp",
                      host="127.0.0.1", dashboard_address=None) as cluster, \
            Client(cluster) as client:
        pids = client.run(os.getpid)
        assert all(address.startswith("tcp://127.0.0.1:") for address in pids)
        progress, killed = killer(lambda: list(pids.values()))
        faulted = simulate(net, runs=160, rng=22, cluster=cluster.scheduler_address,
                           stop_at_consensus=True, progress=progress)
    assert len(killed) == 1
    same(faulted, reference)
