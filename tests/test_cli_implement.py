"""``crn implement`` through the command line: display, JSON, exports and bad input."""

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.io.contract import network_from_dict

MODELS = Path(__file__).resolve().parent.parent / "models"
AM = str(MODELS / "approximate_majority.toml")


def run(*args):
    return CliRunner().invoke(cli, ["implement", *args], catch_exceptions=False)


def test_text_groups_species_by_role_with_lab_units():
    result = run(AM, "--set", "n=100", "--set", "gap=10", "--fuel", "1uM", "--max-rate",
                 "1e7/M/s")
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    roles = [line.split(" ")[0] for line in lines if line.split(" (")[0] in
             ("signal", "fuel", "intermediate", "waste")]
    assert roles == ["signal", "fuel", "intermediate", "waste"]
    assert "fuel (16): L_r1 1 uM" in result.stdout
    # derived: the first step runs at k * rate = 1e5 /M/s, the others at q_max = 1e7 /M/s
    assert any(line.strip().startswith("X + L_r1 -> B_r1 + H_r1") and line.endswith("1e+05 /M/s")
               for line in lines)
    assert any(line.endswith("1e+07 /M/s") for line in lines)
    summary = next(line for line in lines if line.startswith("summary:"))
    assert "3 fuel complexes and 7 strands per reaction" in summary
    assert "total fuel 16 uM" in summary and "supplied" in summary
    assert lines[-1].startswith("caution:")


DECAY = """name = "decay"
[initial]
X = 50
[network]
volume = 100
reactions = [{ reaction = "X -> Y", rate = 2.0 }]
"""


def test_unimolecular_rates_are_shown_per_second(tmp_path, capsys):
    path = tmp_path / "decay.toml"
    path.write_text(DECAY)
    result = run(str(path), "--fuel", "1uM")
    assert result.exit_code == 0, result.output
    # derived: formal rate 2 per time unit of 1 / (1e5 /M/s * 10 nM) = 1000 s is 2e-3 /s;
    # the gate step X + G runs at 2e-3 /s / C_max = 2e3 /M/s
    assert "X + G_r1 -> W_r1 + O_r1" in result.stdout
    assert "2000 /M/s" in result.stdout
    code = main(["implement", str(MODELS / "birth_death.toml")])
    err = capsys.readouterr().err
    assert code == 2 and "--scheme ssw" in err and "0 reactants" in err


def test_json_object(tmp_path):
    result = run(AM, "--set", "n=100", "--set", "gap=10", "--json", "--leak", "10/M/s")
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    for key in ("scheme", "species", "roles", "initial", "volume", "reactions", "fuel",
                "formal"):
        assert key in data
    assert data["scheme"] == "ssw"
    assert set(data["roles"].values()) == {"signal", "fuel", "intermediate", "waste"}
    assert data["fuel"]["L_r1"] == pytest.approx(1e-6)  # default 100 x 10 nM
    assert all(set(r) == {"reactants", "products", "rate"} for r in data["reactions"])
    assert data["formal"]["species"] == ["X", "Y", "B"]
    assert data["parameters"]["leak_per_molar_second"] == 10.0
    assert len(data["leak_reactions"]) == 4
    net = network_from_dict(data)  # loadable as a network, labelled by the decision rule
    assert set(net.ignored) == set(data["species"]) - set(data["decision_labels"])
    assert {s for s, r in data["roles"].items() if r in ("fuel", "waste")} <= set(net.ignored)
    assert data["decision_labels"]["H_r1"] == "X" and data["decision_labels"]["O_r1"] is None
    assert data["output"]["H_r1"] == "X"  # the contract's output carries the same labels
    assert "intermediate" in data["decision_rule"]


def test_exports_like_translate(tmp_path):
    out = tmp_path / "impl.xml"
    result = run(AM, "--set", "n=100", "--set", "gap=10", "--scheme", "two-domain",
                 "--to", "sbml", "-o", str(out))
    assert result.exit_code == 0
    assert out.read_text().lstrip().startswith("<?xml")
    result = run(AM, "--set", "n=100", "--set", "gap=10", "--to", "latex")
    assert result.exit_code == 0 and "\\" in result.stdout


ORDER_THREE = """name = "three"
[initial]
X = 5
[network]
volume = 10
reactions = [{ reaction = "3 X -> X", rate = 1.0 }]
"""


@pytest.mark.parametrize("args, option", [
    (["--fuel", "-1uM"], "--fuel"),
    (["--fuel", "0nM"], "--fuel"),
    (["--fuel", "5nM"], "--fuel"),  # below the 10 nM of signal
    (["--fuel", "10nm"], "--fuel"),  # nm is a length, not a concentration
    (["--fuel", "1e6/M/s"], "--fuel"),
    (["--concentration", "2uL"], "--concentration"),
    (["--leak", "-1/M/s"], "--leak"),
    (["--leak", "3nM"], "--leak"),
    (["--rate", "0/M/s"], "--rate"),
    (["--rate", "-2/M/s"], "--rate"),
    (["--rate", "10nM"], "--rate"),
    (["--max-rate", "1uM"], "--max-rate"),
    (["--rate", "1e7/M/s", "--max-rate", "1e6/M/s"], "--rate"),  # q_i > q_max
    (["--toehold", "4", "--max-rate", "1e6/M/s"], "--toehold"),
    (["--toehold", "31"], "--toehold"),
])
def test_bad_dna_parameter_exits_2_naming_the_option(args, option, capsys):
    code = main(["implement", AM, "--set", "n=100", "--set", "gap=10", *args])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1
    assert option in err


def test_order_three_reaction_exits_2_naming_the_scheme(tmp_path, capsys):
    path = tmp_path / "three.toml"
    path.write_text(ORDER_THREE)
    for scheme in ("ssw", "two-domain"):
        code = main(["implement", str(path), "--scheme", scheme])
        err = capsys.readouterr().err
        assert code == 2 and len(err.strip().splitlines()) == 1
        assert f"--scheme {scheme}" in err and "3 reactants" in err


def test_leak_zero_is_accepted_bare_or_with_a_unit():
    for text in ("0", "0/M/s"):
        assert run(AM, "--set", "n=100", "--set", "gap=10", "--leak", text).exit_code == 0
