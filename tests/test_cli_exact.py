"""``crn exact`` and ``crn verify`` through the command line."""

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.io.models import load_model
from crn.solvers.exact import exact_outcomes

MODELS = Path(__file__).resolve().parents[1] / "models"
AM = str(MODELS / "approximate_majority.toml")


def invoke(args, env=None, code=0):
    result = CliRunner().invoke(cli, args, catch_exceptions=False, env=env)
    assert result.exit_code == code, result.output
    return result


def test_exact_json_contract():
    out = json.loads(invoke(["exact", AM, "--set", "n=30", "--set", "gap=2", "--json"]).stdout)
    assert {"states", "probabilities", "expected_time", "time_std"} <= set(out)
    assert set(out["probabilities"]) == {"X", "Y", "none"}
    assert abs(sum(out["probabilities"].values()) - 1.0) <= 1e-12
    library = exact_outcomes(load_model(AM, {"n": 30, "gap": 2}).network)
    assert out["states"] == library.states == 495  # derived: C(32, 2) - 1 (no all-blank)
    assert out["expected_time"] == pytest.approx(library.expected_time, rel=1e-12)
    assert out["probabilities"]["X"] > out["probabilities"]["Y"]


def test_exact_until_adds_the_transient_probabilities():
    out = json.loads(invoke(["exact", AM, "--set", "n=20", "--set", "gap=2", "--until", "8",
                             "--json"]).stdout)
    transient = out["transient"]
    assert transient["until"] == 8.0 and transient["lost"] == 0.0
    assert set(transient["probabilities"]) == {"X", "Y", "none"}
    for label in ("X", "Y"):
        assert 0 < transient["probabilities"][label] <= out["probabilities"][label]


def test_exact_json_has_no_progress_output_even_when_forced():
    result = invoke(["exact", AM, "--set", "n=20", "--json"], env={"CRN_PROGRESS": "1"})
    json.loads(result.stdout)
    assert result.stderr == ""


def test_exact_human_output():
    text = invoke(["exact", AM, "--set", "n=20", "--set", "gap=2", "--until", "5"]).stdout
    assert "230 configurations" in text  # derived: C(22, 2) - 1
    assert "parallel time" in text and "lost mass" in text


def test_exact_refusal_exits_2(capsys):
    assert main(["exact", AM, "--set", "n=100", "--max-states", "50"]) == 2
    err = capsys.readouterr().err
    assert "5,151 configurations" in err and len(err.strip().splitlines()) == 1


def test_verify_exact_majority_says_correct():
    args = ["verify", str(MODELS / "exact_majority.toml"), "--n-max", "10"]
    assert "correct for every n from 2 to 10" in invoke(args).stdout
    out = json.loads(invoke(args + ["--json"]).stdout)
    assert out["correct"] is True and out["counterexample"] is None
    assert out["checked"] == sum(n + 1 for n in range(2, 11))


def test_verify_wrong_protocol_prints_the_path():
    args = ["verify", str(MODELS / "cancel_spread.toml"), "--n-max", "6"]
    text = invoke(args, code=1).stdout  # refuted: exit status 1
    assert "NOT correct" in text and "counterexample at n = 5" in text
    assert "1. X, Y -> B, B" in text
    out = json.loads(invoke(args + ["--json"], code=1).stdout)
    assert out["correct"] is False
    cx = out["counterexample"]
    assert {"n", "initial", "path"} <= set(cx) and cx["n"] == 5
    assert cx["path"][0] == {"pair": ["X", "Y"], "outcome": ["B", "B"]}


def test_verify_needs_a_question(capsys):
    assert main(["verify", str(MODELS / "epidemic.toml"), "--n-max", "4"]) == 2
    assert "no majority question" in capsys.readouterr().err
