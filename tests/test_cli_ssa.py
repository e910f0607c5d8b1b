"""``crn ssa`` and ``crn compare`` through the command line."""

import csv
import dataclasses
import importlib
import json

import numpy as np
import pytest
from click.testing import CliRunner
from seeds import seed

from crn.analyses.compare import compare_window, disagreement
from crn.cli import cli, main
from crn.solvers.simulate import SimulationInterrupted

AM = "models/approximate_majority.toml"
SMALL = ["--set", "n=80", "--set", "gap=4"]


def invoke(args):
    result = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result


def ssa_json(*extra):
    return json.loads(invoke(["ssa", AM, *SMALL, "--runs", "24", "--seed", "5", "--json",
                              *extra]).stdout)


def test_ssa_json_contract_and_worker_independence():
    one = ssa_json("--workers", "1")
    assert {"runs", "outcomes", "consensus_time", "seed_entropy", "engine"} <= set(one)
    assert one["runs"] == 24 and one["seed_entropy"] == 5 and one["engine"] == "direct"
    assert sum(one["outcomes"].values()) == 24 and "none" in one["outcomes"]
    assert set(one["consensus_time"]) == {"mean", "median", "q05", "q95"}
    assert ssa_json("--workers", "2") == one


def test_ssa_json_same_on_a_dask_cluster():
    from distributed import LocalCluster

    local = ssa_json("--workers", "1")
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tcp",
                      host="127.0.0.1", dashboard_address=None) as cluster:
        remote = ssa_json("--cluster", cluster.scheduler_address)
    assert remote == local


def test_ssa_table_seed_entropy_and_csv(tmp_path):
    out = tmp_path / "runs.csv"
    result = invoke(["ssa", AM, *SMALL, "--runs", "12", "--workers", "1", "--csv", str(out)])
    assert "crn: seed " in result.stderr  # no --seed: the entropy is printed
    assert "95% interval" in result.stdout and "consensus time" in result.stdout
    rows = list(csv.DictReader(out.open()))
    assert len(rows) == 12 and rows[0]["run"] == "0"
    assert {r["label"] for r in rows} <= {"X", "Y", "none"}
    assert all(int(r["final_X"]) + int(r["final_Y"]) + int(r["final_B"]) == 80 for r in rows)
    assert [p.name for p in tmp_path.iterdir()] == ["runs.csv"]  # no temporary file left


def test_ssa_reference_engine_runs(tmp_path):
    data = ssa_json("--runs", "2", "--engine", "reference", "--workers", "1", "--until", "5")
    assert data["engine"] == "reference" and data["runs"] == 2
    # derived (models/birth_death.toml): from x0 = 0, X(t) is Poisson with mean
    # (birth / death)(1 - e^(-death t)) = 10 (1 - e^-5); the mean of R runs lies within
    # 3.29 standard errors sqrt(mean / R) of it (two-sided, level 0.001)
    out, runs = tmp_path / "bd.csv", 80
    invoke(["ssa", "models/birth_death.toml", "--engine", "reference", "--workers", "1",
            "--until", "5", "--runs", str(runs), "--seed", str(seed(62)), "--csv", str(out)])
    finals = np.array([int(r["final_X"]) for r in csv.DictReader(out.open())])
    mean = 10 * (1 - np.exp(-5.0))
    assert finals.size == runs
    assert abs(finals.mean() - mean) < 3.29 * np.sqrt(mean / runs)


def test_ssa_bad_input_exits_2(capsys):
    assert main(["ssa", AM, "--engine", "fast"]) == 2
    assert main(["ssa", "models/missing.toml"]) == 2
    assert main(["ssa", AM, "--set", "n=10", "--cluster", "tcp://127.0.0.1:9",
                 "--seed", "1"]) == 2
    assert "Dask scheduler" in capsys.readouterr().err


def test_ssa_ctrl_c_reports_finished_runs(monkeypatch, capsys):
    module = importlib.import_module("crn.solvers.simulate")  # the command imports it when it runs

    real = module.simulate

    def interrupted(net, **kw):  # one run finishes, then Ctrl-C
        part = real(net, **{**kw, "runs": 1})
        raise SimulationInterrupted(dataclasses.replace(part, requested=kw["runs"]))

    monkeypatch.setattr(module, "simulate", interrupted)
    code = main(["ssa", AM, *SMALL, "--runs", "3", "--seed", "1", "--workers", "1", "--json"])
    assert code == 130
    captured = capsys.readouterr()
    assert "interrupted after 1 of 3 runs" in captured.err
    data = json.loads(captured.out)
    assert data["interrupted"] is True and data["runs"] == 1 and data["requested"] == 3


def test_compare_json_table_and_plot(tmp_path):
    png = tmp_path / "cmp.png"
    args = ["compare", AM, *SMALL, "--runs", "40", "--seed", "2", "--workers", "1"]
    data = json.loads(invoke([*args, "--json", "--plot", str(png)]).stdout)
    assert {"ode", "ssa", "disagreement"} <= set(data)
    assert data["ode"]["label"] == "X"  # the ODE follows the initial majority (X: 42 of 80)
    labels_differing = data["ssa"]["outcomes"].get("Y", 0) + data["ssa"]["outcomes"]["none"]
    assert data["disagreement"]["p"] == pytest.approx(labels_differing / 40)
    assert data["disagreement"]["low"] <= data["disagreement"]["p"] <= data["disagreement"]["high"]
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert_compare_ode_contract(data["ode"])
    text = invoke(args).stdout
    assert "P(run differs from the ODE label X)" in text and "consensus time: ODE" in text


def assert_compare_ode_contract(ode):
    """compare's ``ode`` is the ``crn ode --json`` object (docs/design.md CLI contract)."""
    assert {"times", "fractions", "consensus", "fixed_points"} <= set(ode)
    alone = json.loads(invoke(["ode", AM, *SMALL, "--json"]).stdout)
    # same ODE as `crn ode`; both solves locate the consensus event at rtol 1e-10
    assert ode["consensus"]["label"] == alone["consensus"]["label"] == "X"
    assert ode["consensus"]["time"] == pytest.approx(alone["consensus"]["time"], rel=1e-6)
    assert ode["fixed_points"] == alone["fixed_points"]
    # derived: AM's mean field has the two consensus corners stable and the tie x = y = b
    # (dx/dt and dy/dt vanish when b = y = x) as a saddle
    kinds = {(round(p["point"]["X"], 9), round(p["point"]["Y"], 9)): p["classification"]
             for p in ode["fixed_points"]}
    assert kinds[(1.0, 0.0)] == kinds[(0.0, 1.0)] == "stable"
    assert kinds[(round(1 / 3, 9), round(1 / 3, 9))] == "saddle"
    # derived: compare samples 201 times over twice the ODE consensus time (< the horizon)
    times = np.asarray(ode["times"])
    assert times.size == 201 and times[0] == 0.0
    assert times[-1] == pytest.approx(compare_window(ode["consensus"]["time"], 1e9))
    fractions = {s: np.asarray(v) for s, v in ode["fractions"].items()}
    assert set(fractions) == {"X", "Y", "B"} and all(v.size == 201 for v in fractions.values())
    # derived: initial fractions 42/80, 38/80, 0; the agent count is conserved
    assert (fractions["X"][0], fractions["Y"][0], fractions["B"][0]) == pytest.approx(
        (42 / 80, 38 / 80, 0.0))
    assert fractions["X"] + fractions["Y"] + fractions["B"] == pytest.approx(1.0, abs=1e-8)


def test_disagreement_and_window():
    # no consensus counts as disagreement; Wilson interval (crn.core.stats) around 2/3
    p, low, high = disagreement(["X", "Y", None], "X")
    assert p == pytest.approx(2 / 3) and low < p < high
    assert disagreement(["X", "X"], None)[0] == 1.0
    assert compare_window(5.0, 100.0) == 10.0 and compare_window(None, 100.0) == 100.0
    assert compare_window(80.0, 100.0) == 100.0
    assert np.isfinite(compare_window(1e-3, 1.0))
