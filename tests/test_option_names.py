"""Renamed options: the new spelling, and the old one for one release with a warning."""

import json
from pathlib import Path

import click
import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.commands.options import RenamedOption
from crn.commands.regimes import regimes
from crn.commands.report import report
from crn.commands.verify import verify

MODELS = Path(__file__).resolve().parents[1] / "models"
AM = str(MODELS / "approximate_majority.toml")
EM = str(MODELS / "exact_majority.toml")
WARNING = "crn: warning: {old} is deprecated and will be removed in the next release; use {new}"

# (command, old spelling, new spelling, value, parameter name)
RENAMED = [
    (verify, "--max-n", "--n-max", "7", "n_max"),
    (regimes, "--gap", "--gaps", "2,4", "gap_list"),
    (regimes, "--gap-fraction", "--gap-fractions", "0.1,0.2", "fraction_list"),
    (report, "--regime-gap-fraction", "--regime-gap-fractions", "0.1,0.3", "regime_gap_fraction"),
]


def _params(command, args):
    with command.make_context(command.name, [AM, *args]) as ctx:
        return ctx.params


@pytest.mark.parametrize("command, old, new, value, name", RENAMED)
def test_both_spellings_give_the_same_value(command, old, new, value, name, capsys):
    extra = ["--n", "20"] if command is regimes else []
    with_new = _params(command, [new, value, *extra])
    assert capsys.readouterr().err == ""  # the new spelling says nothing
    with_old = _params(command, [f"{old}={value}", *extra])
    assert capsys.readouterr().err.strip() == WARNING.format(old=old, new=new)
    assert with_new[name] == with_old[name] == (int(value) if name == "n_max" else value)
    assert with_old == with_new


@pytest.mark.parametrize("command, old, new, value, name", RENAMED)
def test_help_shows_only_the_new_spelling(command, old, new, value, name):
    text = CliRunner().invoke(cli, [command.name, "--help"], terminal_width=200).stdout
    assert f"{new} " in text
    assert f"was {old})" in " ".join(text.split())  # the help says what it used to be called
    assert f"  {old} " not in text and f", {old} " not in text


def test_the_new_spelling_wins_when_both_are_given(capsys):
    params = _params(verify, ["--n-max", "3", "--max-n", "9"])
    assert params["n_max"] == 3
    assert "--max-n is deprecated" in capsys.readouterr().err


def test_verify_answers_the_same_under_both_spellings():
    runner = CliRunner()
    new = runner.invoke(cli, ["verify", EM, "--n-max", "5", "--json"])
    old = runner.invoke(cli, ["verify", EM, "--max-n", "5", "--json"])
    assert new.exit_code == old.exit_code == 0
    assert json.loads(new.stdout) == json.loads(old.stdout)
    # derived: n = 2..5 with every split of n agents between X and Y: 3 + 4 + 5 + 6 cases
    assert json.loads(new.stdout)["checked"] == 18
    assert new.stderr == "" and old.stderr.count("\n") == 1


def test_verify_json_names_the_largest_n_n_max_and_keeps_max_n_for_a_release():
    result = CliRunner().invoke(cli, ["verify", EM, "--n-max", "4", "--json"])
    assert result.exit_code == 0, result.output
    obj = json.loads(result.stdout)
    assert obj["n_max"] == 4  # the option's value
    assert obj["max_n"] == 4  # deprecated duplicate, removed in the next release


def test_regimes_answers_the_same_under_both_spellings():
    runner = CliRunner()
    base = ["regimes", AM, "--n", "20", "--method", "exact", "--seed", "1", "--json"]
    new = runner.invoke(cli, [*base, "--gaps", "2,6"])
    old = runner.invoke(cli, [*base, "--gap", "2,6"])
    assert new.exit_code == old.exit_code == 0, old.output
    new_cells, old_cells = json.loads(new.stdout)["cells"], json.loads(old.stdout)["cells"]
    assert [(c["n"], c["gap"]) for c in new_cells] == [(20, 2), (20, 6)]
    assert new_cells == old_cells
    assert "--gap is deprecated" in old.stderr and "deprecated" not in new.stderr


def test_a_bad_value_under_the_old_spelling_is_still_refused(capsys):
    assert main(["verify", EM, "--max-n", "1"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err[0] == WARNING.format(old="--max-n", new="--n-max")
    assert err[1].startswith("crn: ") and "1 is not in the range x>=2" in err[1]


def test_a_flag_cannot_be_renamed_this_way():
    with pytest.raises(TypeError, match="value"):
        click.option("--quiet", is_flag=True, cls=RenamedOption, old=("--silent",))(lambda: None)
