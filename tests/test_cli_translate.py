"""`crn translate` and `crn check` through the command line."""

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.io.sbml import network_from_sbml, sbml_consistency

MODELS = Path(__file__).resolve().parent.parent / "models"
AM = str(MODELS / "approximate_majority.toml")


def run(*args):
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result


def test_translate_json_prints_the_contract_object():
    result = run("translate", AM, "--set", "n=100", "--set", "gap=4", "--json")
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    # docs/design.md contract: species, initial, volume, reactions [{reactants, products, rate}]
    assert data["species"] == ["X", "Y", "B"]
    assert data["initial"] == {"X": 52, "Y": 48, "B": 0}
    assert data["volume"] == 99
    assert len(data["reactions"]) == 4
    assert all(set(r) == {"reactants", "products", "rate"} for r in data["reactions"])


def test_translate_prints_text_by_default():
    result = run("translate", AM, "--set", "n=10", "--set", "gap=2")
    assert result.exit_code == 0
    assert result.stdout.splitlines()[3] == "X + Y -> X + B   rate 1"


def test_translate_latex_to_stdout():
    result = run("translate", str(MODELS / "epidemic.toml"), "--to", "latex")
    assert result.stdout == ("\\begin{align*}\n"
                             "  \\mathrm{I} + \\mathrm{S} &\\xrightarrow{2} 2\\,\\mathrm{I}\n"
                             "\\end{align*}\n")


def test_translate_sbml_to_file_is_consistent_and_reads_back(tmp_path):
    out = tmp_path / "x.xml"
    result = run("translate", AM, "--set", "n=100", "--set", "gap=4", "--to", "sbml",
                 "-o", str(out))
    assert result.exit_code == 0
    assert result.stdout == ""
    assert "wrote" in result.stderr
    text = out.read_text()
    assert sbml_consistency(text)[0] == []
    net = network_from_sbml(text)
    assert list(net.initial) == [52, 48, 0] and net.volume == 99
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.xml"]  # no temporary left


def test_translate_file_and_json_together(tmp_path):
    out = tmp_path / "net.tex"
    result = run("translate", AM, "--to", "latex", "-o", str(out), "--json")
    assert result.exit_code == 0
    assert json.loads(result.stdout)["volume"] == 999
    assert out.read_text().startswith("\\begin{align*}")


def test_translate_json_with_another_format_and_no_file_is_refused(capsys):
    assert main(["translate", AM, "--to", "sbml", "--json"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "-o FILE" in err


def test_check_reports_reachability_dead_rules_and_lost_labels(tmp_path):
    model = tmp_path / "odd.toml"
    model.write_text("""name = "odd"
about = "test model"
[initial]
X = 3
Y = 2
[protocol]
transitions = [
  "X, Y -> X, X",
  "Z, X -> Z, Z",
  "Y, X -> X, Y",
]
[output]
X = "x"
Z = "z"
""")
    result = run("check", str(model), "--json")
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    assert data["states"] == ["X", "Y", "Z"]
    assert data["reachable"] == ["X", "Y"]
    assert data["unreachable"] == ["Z"]
    assert data["conserves_agents"] is True
    assert data["dead_rules"] == ["Z, X -> Z, Z"]
    assert data["unreachable_labels"] == ["z"]
    rules = {r["rule"]: r for r in data["rules"]}
    assert rules["Z, X -> Z, Z"]["unreachable_reactants"] == ["Z"]
    assert rules["Z, X -> Z, Z"]["line"] == 9
    assert rules["Y, X -> X, Y"]["changes_state"] is False
    assert any("changes nothing" in w for w in data["warnings"])

    text = run("check", str(model)).stdout
    assert "unreachable  Z" in text
    assert "never fires" in text
    assert "labels no reachable state reports: z" in text


def test_check_of_a_network_reports_molecule_changes():
    result = run("check", str(MODELS / "birth_death.toml"), "--json")
    data = json.loads(result.stdout)
    assert [r["net_change"] for r in data["rules"]] == [1, -1]
    assert data["conserves_agents"] is False
    assert data["reachable"] == ["X"]  # 0 -> X fires from the empty start
    assert data["warnings"] == []


@pytest.mark.parametrize("name", ["approximate_majority.toml", "exact_majority.toml",
                                  "undecided_state.toml", "voter.toml", "epidemic.toml"])
def test_check_finds_nothing_odd_in_the_published_protocols(name):
    data = json.loads(run("check", str(MODELS / name), "--json").stdout)
    assert data["warnings"] == [] and data["dead_rules"] == []
    assert data["unreachable"] == []
