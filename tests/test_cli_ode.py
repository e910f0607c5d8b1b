"""``crn ode`` through click's CliRunner and ``crn.cli.main``."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.io.models import load_model
from crn.solvers.ode import solve_mean_field

ROOT = Path(__file__).resolve().parent.parent
AM = str(ROOT / "models" / "approximate_majority.toml")
EPIDEMIC = str(ROOT / "models" / "epidemic.toml")


def _run(*args):
    result = CliRunner().invoke(cli, ["ode", *args], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result.output


def test_acceptance_json_consensus_and_fixed_points():
    data = json.loads(_run(AM, "--set", "n=1000", "--set", "gap=10", "--json"))
    assert {"times", "fractions", "consensus", "fixed_points"} <= set(data)
    expected = solve_mean_field(load_model(AM, {"n": 1000, "gap": 10}).network)
    assert data["consensus"]["label"] == "X"
    assert data["consensus"]["time"] == pytest.approx(expected.consensus.time, rel=1e-12)
    assert data["correct"] == "X"
    assert len(data["times"]) == len(data["fractions"]["X"]) == expected.times.size
    np.testing.assert_allclose(data["fractions"]["Y"], expected.fractions["Y"], rtol=1e-12)
    kinds = {(p["classification"], p["consensus"], p["tie"]) for p in data["fixed_points"]}
    assert kinds == {("stable", "X", False), ("stable", "Y", False), ("unstable", None, False),
                     ("saddle", None, True)}
    tie = next(p for p in data["fixed_points"] if p["tie"])
    # derived in tests/test_fixed_points.py: eigenvalues 1/3 and -1 at x = y = b = 1/3
    assert tie["eigenvalues"] == pytest.approx([1 / 3, -1], abs=1e-10)
    assert tie["point"] == pytest.approx({"X": 1 / 3, "Y": 1 / 3, "B": 1 / 3})


def test_equations_and_latex():
    text = _run(EPIDEMIC, "--equations")
    assert "dI/dt = 2*I*S" in text and "dS/dt = -2*I*S" in text
    latex = _run(EPIDEMIC, "--latex")
    assert r"\frac{dI}{dt} &= 2 I S" in latex
    data = json.loads(_run(EPIDEMIC, "--equations", "--json"))
    assert data["equations"] == {"I": "2*I*S", "S": "-2*I*S"}


def test_at_reports_exactly_the_requested_times():
    data = json.loads(_run(EPIDEMIC, "--at", "0,1,2.5,10", "--json", "--no-fixed-points"))
    assert data["times"] == [0, 1, 2.5, 10]
    assert data["fixed_points"] is None
    f0 = 1 / 1000
    t = np.array(data["times"])
    # derived: logistic f(t) = f0 e^{2t} / (1 - f0 + f0 e^{2t})
    logistic = f0 * np.exp(2 * t) / (1 - f0 + f0 * np.exp(2 * t))
    np.testing.assert_allclose(data["fractions"]["I"], logistic, atol=1e-7)


def test_text_output_and_files(tmp_path):
    plot, table = tmp_path / "am.png", tmp_path / "am.csv"
    out = _run(AM, "--set", "n=500", "--plot", str(plot), "--csv", str(table))
    assert "consensus    X at t =" in out and "saddle (tie)" in out
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    rows = list(csv.reader(table.open()))
    assert rows[0] == ["time", "X", "Y", "B"]
    values = np.array(rows[1:], dtype=float)
    assert np.abs(values[:, 1:].sum(axis=1) - 1).max() < 1e-9
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_network_model_reports_concentrations():
    path = ROOT / "models" / "birth_death.toml"  # shipped: a missing file fails the test
    data = json.loads(_run(str(path), "--until", "5", "--at", "1,5", "--json"))
    assert data["units"] == "concentration"
    assert set(data["concentrations"]) == set(data["fractions"])
    # derived (the model's about): the mean x(t) = (birth / death)(1 - e^(-death t)) from
    # x0 = 0, birth 10, death 1, volume 1, so the concentration is that mean
    t = np.array(data["times"])
    np.testing.assert_allclose(data["concentrations"]["X"], 10 * (1 - np.exp(-t)), rtol=1e-5)


@pytest.mark.parametrize("argv", [
    ["ode", AM, "--at", "1,x"],
    ["ode", AM, "--at", "-1"],
    ["ode", AM, "--until", "0"],
    ["ode", AM, "--until", "5", "--at", "1,10"],
    ["ode", AM, "--set", "nope=3"],
    ["ode", str(ROOT / "models" / "missing.toml")],
])
def test_bad_input_exits_2(argv, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.startswith("crn: ") and err.count("\n") == 1
