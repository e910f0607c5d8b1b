"""The library behind ``crn compare``: one ODE solve, the runs beside it, the summaries."""

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

from crn.analyses.compare import (
    SAMPLES,
    compare_network,
    compare_runs,
    compare_window,
    mean_field_window,
)
from crn.cli import cli
from crn.core.stats import wilson_interval
from crn.io.models import load_model
from crn.solvers.ode import solve_mean_field
from crn.solvers.simulate import default_horizon, simulate

AM = "models/approximate_majority.toml"


def _am(n=80, gap=4):
    return load_model(AM, {"n": n, "gap": gap}).network


def _counting_solve_ivp(monkeypatch):
    import crn.solvers.ode as ode_module

    calls = []
    real = ode_module.solve_ivp

    def counted(*args, **kwargs):
        calls.append(kwargs.get("t_eval"))
        return real(*args, **kwargs)

    monkeypatch.setattr(ode_module, "solve_ivp", counted)
    return calls


def test_the_window_comes_from_one_solve_and_matches_separate_solves(monkeypatch):
    net = _am()
    calls = _counting_solve_ivp(monkeypatch)
    window = mean_field_window(net)
    assert len(calls) == 1  # the ODE is solved once
    monkeypatch.undo()
    horizon = default_horizon(net)
    stopped = solve_mean_field(net, until=horizon)  # what a solve stopping at consensus says
    assert window.horizon == horizon
    assert window.consensus.label == stopped.consensus.label == "X"
    # same integrator steps up to the event, so the event time agrees to its root finder
    assert window.consensus.time == pytest.approx(stopped.consensus.time, rel=1e-9)
    assert (window.consensus.final_label, window.consensus.held) == (
        stopped.consensus.final_label, stopped.consensus.held)
    # derived: SAMPLES equally spaced times over twice the consensus time (below the horizon)
    assert window.times.size == SAMPLES and window.times[0] == 0.0
    assert window.window == pytest.approx(2 * stopped.consensus.time)
    # the continuous solution agrees with a solve reporting at those times, within the
    # integrator's tolerances (rtol 1e-10, atol 1e-12, on fractions of order 1)
    sampled = solve_mean_field(net, times=window.times, until=window.window,
                               stop_at_consensus=False)
    np.testing.assert_allclose(window.ode.values, sampled.values, rtol=0, atol=1e-8)
    assert window.ode.consensus == window.consensus


def test_crn_compare_solves_the_ode_once(monkeypatch):
    calls = _counting_solve_ivp(monkeypatch)
    result = CliRunner().invoke(cli, ["compare", AM, "--set", "n=60", "--set", "gap=6",
                                      "--runs", "4", "--seed", "1", "--workers", "1"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert len(calls) == 1


def test_no_consensus_samples_the_whole_horizon():
    # derived: the birth-death network has no output labels, so no consensus: the window is
    # the whole horizon and the consensus is empty
    net = load_model("models/birth_death.toml").network
    window = mean_field_window(net, until=3.0)
    assert window.consensus.label is None and window.consensus.time is None
    assert window.window == pytest.approx(3.0) and window.times.size == SAMPLES


def test_compare_runs_counts_disagreement_and_lists_the_ode_label():
    net = _am()
    window = mean_field_window(net)
    ensemble = simulate(net, runs=30, until=window.horizon, times=window.times, rng=7,
                        workers=1)
    result = compare_runs(window, ensemble)
    differ = sum(1 for label in ensemble.labels if label != "X")
    # derived: P(differ) is the share of runs whose first consensus is not the ODE's label,
    # with the Wilson interval (Wilson, J. Amer. Statist. Assoc. 22:209, 1927)
    assert result.disagreement == wilson_interval(differ, 30)
    rows = result.outcome_rows()
    assert [r["label"] for r in rows][-1] == "none"
    assert sum(r["runs"] for r in rows) == 30
    assert [r["label"] for r in rows if r["ode"]] == ["X"]
    for row in rows:
        assert (row["p"], row["low"], row["high"]) == wilson_interval(row["runs"], 30)


def test_compare_network_is_the_command_in_one_call():
    net = _am()
    result = compare_network(net, runs=12, rng=3, workers=1)
    data = json.loads(CliRunner().invoke(
        cli, ["compare", AM, "--set", "n=80", "--set", "gap=4", "--runs", "12", "--seed", "3",
              "--workers", "1", "--json"], catch_exceptions=False).stdout)
    assert result.ensemble.outcomes() == data["ssa"]["outcomes"]
    assert list(result.disagreement) == pytest.approx(
        [data["disagreement"][k] for k in ("p", "low", "high")])
    assert data["ode"]["consensus"]["time"] == pytest.approx(result.ode_time)
    assert compare_window(result.ode_time, result.mean_field.horizon) == pytest.approx(
        data["ode"]["times"][-1])


def test_sampled_needs_the_continuous_solution():
    net = _am()
    plain = solve_mean_field(net)
    with pytest.raises(ValueError, match="dense_output"):
        plain.sampled([0.0, 1.0])
    dense = solve_mean_field(net, until=5.0, stop_at_consensus=False, dense_output=True)
    with pytest.raises(ValueError, match="solved span"):
        dense.sampled([0.0, 6.0])
    at = dense.sampled([0.0, 2.5, 5.0])
    # derived: the initial fractions are 42/80, 38/80 and 0
    assert at.values[0] == pytest.approx([42 / 80, 38 / 80, 0.0])
    assert at.values[-1] == pytest.approx(dense.values[-1], abs=1e-10)
    assert math.isclose(at.values[1].sum(), 1.0, abs_tol=1e-9)  # agents are conserved
