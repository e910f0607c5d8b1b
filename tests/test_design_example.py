"""docs/design.md against the code: its model example loads, its JSON table matches the commands."""

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from crn.cli import cli
from crn.core.model import parse_model
from crn.io.text import network_to_text

ROOT = Path(__file__).resolve().parents[1]
DESIGN = (ROOT / "docs" / "design.md").read_text(encoding="utf-8")
AM = str(ROOT / "models" / "approximate_majority.toml")
SMALL = ["--set", "n=40", "--set", "gap=4"]


def test_design_example_translates_without_changes():
    text = re.search(r"```toml\n(.*?)```", DESIGN, re.S).group(1)
    net = parse_model(text, source="docs/design.md", overrides={"n": 5000}).network
    # derived from the translation rule of docs/design.md: ordered pairs (X,Y) and (Y,X) give
    # two distinct reactions; (B,B) -> (X,Y) with p = 0.5 gives 2 B -> X + Y at rate 0.5;
    # the volume is n - 1
    assert net.volume == 4999
    assert dict(zip(net.species, net.initial.tolist(), strict=True)) == {
        "X": 2505, "Y": 2495, "B": 0}
    lines = [line for line in network_to_text(net).splitlines() if not line.startswith("#")]
    assert [" ".join(line.split()) for line in lines] == [
        "X + Y -> X + B rate 1",
        "X + Y -> Y + B rate 1",
        "X + B -> 2 X rate 1",
        "Y + B -> 2 Y rate 1",
        "2 B -> X + Y rate 0.5",
    ]
    assert net.majority == ("X", "Y")
    assert net.output == {"X": "X", "Y": "Y"}


def _documented_keys():
    """command -> top-level keys in the JSON column of the table (nested ones in brackets)."""
    out = {}
    for line in DESIGN.splitlines():
        row = re.match(r"\| `crn (\w+)` \|.*\| (.*) \|$", line)
        if row:
            column = row.group(2)
            while re.search(r"\([^()]*\)", column):  # drop nested keys and remarks
                column = re.sub(r"\([^()]*\)", "", column)
            out[row.group(1)] = set(re.findall(r"`(\w+)`", column))
    return out


RUNS = {
    "translate": ["translate", AM, *SMALL],
    "ode": ["ode", AM, *SMALL],
    "ssa": ["ssa", AM, *SMALL, "--runs", "3", "--seed", "1", "--workers", "1"],
    "exact": ["exact", AM, "--set", "n=8", "--set", "gap=2"],
    "verify": ["verify", AM, "--n-max", "4"],
    "compare": ["compare", AM, *SMALL, "--runs", "3", "--seed", "1", "--workers", "1"],
    "regimes": ["regimes", AM, "--n", "20,40,80", "--gap-fractions", "0.1,0.3,0.5",
                "--method", "exact", "--seed", "1"],
    "copies": ["copies", AM, "--gap-fraction", "0.3", "--risk", "0.1", "--method", "exact",
               "--seed", "1"],
    "check": ["check", AM],
    "implement": ["implement", AM, *SMALL],
    "report": ["report", AM, *SMALL, "--runs", "0", "--regime-n", "", "--seed", "1"],
}


def test_every_command_is_in_the_design_table():
    assert set(cli.commands) <= set(_documented_keys())


@pytest.mark.parametrize("command", sorted(RUNS))
def test_json_has_the_documented_keys(command, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # files a command writes by default land here
    result = CliRunner().invoke(cli, [*RUNS[command], "--json"])
    assert result.exit_code in (0, 1), result.output  # verify exits 1 on a counterexample
    data = json.loads(result.stdout)
    assert _documented_keys()[command] <= set(data), _documented_keys()[command] - set(data)


def test_no_reference_to_a_design_file_outside_the_repository():
    outside = "DESIGN" + ".md"  # the shared file of the early design; now docs/design.md
    for folder in ("crn", "tests"):
        for path in (ROOT / folder).rglob("*.py"):
            assert outside not in path.read_text(encoding="utf-8"), path


def test_the_version_is_written_once():
    import tomllib

    import crn

    pyproject = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    assert "version" not in pyproject["project"] and "version" in pyproject["project"]["dynamic"]
    assert pyproject["tool"]["setuptools"]["dynamic"]["version"] == {"attr": "crn.__version__"}
    result = CliRunner().invoke(cli, ["--version"])
    assert result.stdout.strip().endswith(crn.__version__)
