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


# -- several networks on one window: the formal network and its DNA implementation ----------


def _implementation(n=40, gap=10):
    from crn.analyses.implemented import implementation_of
    from crn.dna import DnaParameters

    formal = _am(n, gap)
    # 10 nM of signal, fuel at 50 nM, 1e5 /M/s per unit of formal rate (the DNA defaults)
    return formal, implementation_of(formal, "ssw", DnaParameters(rate=1e5, concentration=1e-8,
                                                                  fuel=5e-8))


def test_windows_share_one_grid_and_keep_the_state_at_the_consensus_stop():
    from crn.analyses.compare import mean_field_windows

    formal, impl = _implementation()
    horizon = default_horizon(formal)
    windows = mean_field_windows([formal, impl.network])
    stopped = [solve_mean_field(net, until=horizon) for net in (formal, impl.network)]
    latest = max(s.consensus.time for s in stopped)
    for window, stop in zip(windows, stopped, strict=True):
        assert window.horizon == horizon
        assert window.consensus.label == stop.consensus.label == "X"
        assert window.consensus.time == pytest.approx(stop.consensus.time, rel=1e-9)
        # derived: one grid, twice the later consensus time (the implementation's: its
        # gates sequester signal and slow it down)
        assert window.window == pytest.approx(2 * latest)
        np.testing.assert_array_equal(window.times, windows[0].times)
        # the state where a solve stopping at the consensus ends, within its tolerances
        np.testing.assert_allclose(window.at_stop, stop.values[-1], rtol=1e-8, atol=1e-12)
    assert windows[1].consensus.time > windows[0].consensus.time
    single = mean_field_windows([formal])[0]  # alone, the formal window is its own
    assert single.window == pytest.approx(2 * stopped[0].consensus.time)


def test_compare_implement_fuel_is_that_of_a_separate_solve_stopping_at_consensus(capsys):
    from crn.analyses.implemented import fuel_left_ode
    from crn.cli import main

    formal, impl = _implementation()
    assert main(["compare", AM, "--set", "n=40", "--set", "gap=10", "--implement", "ssw",
                 "--fuel", "50nM", "--runs", "4", "--seed", "1", "--workers", "1",
                 "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    # independent: the implementation's ODE solved on its own, stopping at its consensus
    stopped = solve_mean_field(impl.network, until=default_horizon(formal))
    expected = fuel_left_ode(impl, stopped)
    assert min(expected.values()) < 0.9  # a figure that moves: some gate is well spent
    assert set(obj["fuel"]) == set(expected) == set(obj["ode"]["fuel"])
    for species, left in expected.items():
        assert obj["fuel"][species] == pytest.approx(left, rel=1e-8, abs=1e-12)
    assert obj["ode"]["time"] == pytest.approx(stopped.consensus.time, rel=1e-9)
    formal_stop = solve_mean_field(formal, until=default_horizon(formal))
    assert obj["formal_ode"]["time"] == pytest.approx(formal_stop.consensus.time, rel=1e-9)


def test_compare_implement_solves_each_ode_once(monkeypatch):
    import crn.solvers.ode as ode_module

    formal, impl = _implementation()
    calls = []
    real = ode_module.solve_mean_field

    def counted(net, **kwargs):
        calls.append(net.species)
        return real(net, **kwargs)

    monkeypatch.setattr(ode_module, "solve_mean_field", counted)
    result = CliRunner().invoke(cli, ["compare", AM, "--set", "n=40", "--set", "gap=10",
                                      "--implement", "ssw", "--fuel", "50nM", "--runs", "4",
                                      "--seed", "1", "--workers", "1"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert calls.count(formal.species) == 1
    assert calls.count(impl.network.species) == 1
