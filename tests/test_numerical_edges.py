"""Numerical edges (README, "Reliability"): each gives a sensible answer or a one-line refusal."""

import json
import math

import pytest
from click.testing import CliRunner

from crn.cli import cli, main

AM = "models/approximate_majority.toml"
TWO_WAY = """name = "two-way"
[initial]
A = 10
B = 10
[network]
volume = 1
reactions = [
  { reaction = "A -> B", rate = 1e12 },
  { reaction = "B -> A", rate = 1e-12 },
]
"""


def run_json(args):
    result = CliRunner().invoke(cli, [*map(str, args), "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def refused(args, capsys, match):
    assert main([*map(str, args)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and match in err[0], err
    return err[0]


def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_two_agents_at_a_tie():
    data = run_json(["exact", AM, "--set", "n=2", "--set", "gap=0"])
    # derived: X=Y=1, volume n - 1 = 1. X,Y -> X,B and Y,X -> Y,B each have propensity 1, so
    # the first step takes Exp(2) and picks X or Y with probability 1/2 (symmetry); the
    # winner then converts the blank at propensity 1, Exp(1). E[T] = 1/2 + 1 = 1.5,
    # Var T = 1/4 + 1 = 1.25.
    assert data["probabilities"] == {"X": 0.5, "Y": 0.5, "none": 0.0}
    assert data["expected_time"] == pytest.approx(1.5, rel=1e-12)
    assert data["time_std"] == pytest.approx(math.sqrt(1.25), rel=1e-12)
    assert data["states"] == 5  # derived: (1,1,0), (1,0,1), (0,1,1), (2,0,0), (0,2,0)


@pytest.mark.parametrize("n", [2, 100])
def test_gap_equal_to_n_is_consensus_from_the_start(n):
    args = [AM, "--set", f"n={n}", "--set", f"gap={n}"]
    exact = run_json(["exact", *args])
    assert exact["probabilities"]["X"] == 1.0 and exact["expected_time"] == 0.0
    ssa = run_json(["ssa", *args, "--runs", "5", "--seed", "1", "--workers", "1"])
    assert ssa["outcomes"]["X"] == 5
    assert ssa["consensus_time"]["mean"] == 0.0
    ode = run_json(["ode", *args])
    assert ode["message"] == "consensus at the start" and ode["fractions"]["X"][0] == 1.0


def test_zero_rate_reactions_and_no_reactions(tmp_path):
    bd = open("models/birth_death.toml").read()
    zero = write(tmp_path, "zero.toml", bd.replace("birth = 10.0", "birth = 0.0")
                 .replace("death = 1.0", "death = 0.0").replace("x0 = 0", "x0 = 7"))
    inert = write(tmp_path, "inert.toml",
                  'name = "inert"\n[initial]\nX = 5\n[network]\nvolume = 1\nreactions = []\n')
    for path, count in ((zero, 7), (inert, 5)):
        ssa = run_json(["ssa", path, "--runs", "3", "--seed", "1", "--workers", "1"])
        assert ssa["runs"] == 3 and ssa["events_mean"] == 0.0  # nothing can fire
        ode = run_json(["ode", path])
        assert ode["concentrations"]["X"][-1] == pytest.approx(count)  # volume 1
        exact = run_json(["exact", path])
        assert exact["states"] == 1 and exact["transitions"] == 0


def test_rates_from_1e_minus_12_to_1e12(tmp_path, capsys):
    path = write(tmp_path, "two_way.toml", TWO_WAY)
    ode = run_json(["ode", path])
    # derived: the fixed point of A' = -1e12 A + 1e-12 B with A + B = 20 is
    # A = 20 / (1 + 1e24): A is gone to roundoff, B holds all 20
    assert ode["concentrations"]["B"][-1] == pytest.approx(20, rel=1e-9)  # volume 1
    assert abs(ode["concentrations"]["A"][-1]) < 1e-9
    exact = run_json(["exact", path])
    assert exact["states"] == 21  # derived: A + B = 20 conserved, A = 0..20
    # the default horizon follows the slow reaction (1e13): refused with the estimate ...
    refused(["ssa", path, "--runs", "3", "--seed", "1"], capsys, "more than 24 h")
    # ... while a horizon on the fast scale runs: all ten A turn into B within 1e-9
    ssa = run_json(["ssa", path, "--runs", "3", "--seed", "1", "--workers", "1", "--until",
                    "1e-9"])
    assert ssa["runs"] == 3 and 10 <= ssa["events_mean"] < 20


def test_counts_near_2_to_the_62(tmp_path, capsys):
    net = {"name": "big", "species": ["A"], "initial": {"A": 2**62},
           "reactions": [{"reactants": {"A": 1}, "products": {}, "rate": 1}]}
    big_json = write(tmp_path, "big.json", json.dumps(net))
    refused(["ssa", big_json], capsys, "from 0 to 2**60, got 4611686018427387904")
    big_toml = write(tmp_path, "big.toml", 'name = "big"\n[initial]\nA = 4611686018427387904\n'
                     '[network]\nvolume = 1\nreactions = [{ reaction = "A -> 0", rate = 1 }]\n')
    refused(["ode", big_toml], capsys, "above the largest count 2**60")
    at_limit = write(tmp_path, "limit.toml", big_toml.read_text().replace(
        "4611686018427387904", str(2**60)))
    # 2**60 molecules load; their decay is one ODE, and 1e18 stochastic events are refused
    ode = run_json(["ode", at_limit, "--until", "1"])
    # derived: A(t) = A(0) e^-t
    assert ode["concentrations"]["A"][-1] == pytest.approx(2**60 * math.exp(-1), rel=1e-4)
    refused(["ssa", at_limit, "--runs", "1", "--seed", "1"], capsys, "events per run")
    refused(["ssa", AM, "--set", "n=4e18", "--set", "gap=2", "--force"], capsys,
            "above the largest count 2**60")
