"""The decision-label rule of crn.dna.labels: one rule for `crn implement` and every analysis."""

import json

import numpy as np
import pytest

from crn.analyses.implemented import ImplementedCells
from crn.analyses.probes import InitialSplit
from crn.cli import main
from crn.commands.implementing import implement_network
from crn.core.network import IGNORED, Network, Reaction
from crn.dna import DECISION_RULE, DnaParameters, decision_labels, implement
from crn.io.contract import network_from_dict
from crn.io.models import load_model
from crn.io.sbml import network_from_sbml, network_to_sbml

AM = "models/approximate_majority.toml"
PARAMS = DnaParameters(rate=1e5, concentration=1e-8)


def _am(n=100, gap=10):
    return load_model(AM, {"n": n, "gap": gap}).network


def _json(capsys, args):
    assert main(args) == 0
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("scheme", ["ssw", "two-domain"])
def test_implement_and_the_analyses_read_the_same_labels(capsys, scheme):
    """`crn implement --json` (loaded back as a network), the network `--implement` runs on
    and a regime map's cell all label every species alike."""
    obj = _json(capsys, ["implement", AM, "--set", "n=100", "--set", "gap=10", "--scheme",
                         scheme, "--leak", "10/M/s", "--json"])
    exported = network_from_dict(obj)
    params = DnaParameters(rate=1e5, concentration=1e-8, leak=10.0)
    analysed = implement_network(_am(), (scheme, params)).network
    cell = ImplementedCells(InitialSplit(_am()), scheme, params)(100, 10)
    for net in (analysed, cell):
        assert net.species == exported.species
        assert net.labels == exported.labels
        assert np.array_equal(net.species_label, exported.species_label)
    # the labels say more than "signals only": some intermediates count
    held = {s for s, r in obj["roles"].items() if r == "intermediate"} & set(obj["output"])
    assert held


def test_ssw_labels_follow_the_rule():
    """Approximate majority (X + Y -> X + B, X + Y -> Y + B, X + B -> 2 X, Y + B -> 2 Y) in the
    2010 construction: H_ri holds the first reactant's strand, O_ri releases the products,
    HS_X holds X for buffering; B reports no label in the formal network."""
    imp = implement(_am(), "ssw", PARAMS)
    labels = imp.decision_labels
    assert labels["X"] == "X" and labels["Y"] == "Y" and labels["B"] is None
    assert labels["H_r1"] == "X" and labels["H_r2"] == "Y"  # first reactants X, Y
    assert labels["H_r3"] is None  # B (no label) bound to the gate of X + B -> 2 X
    assert labels["O_r1"] is None  # products X + B: mixed with "no label"
    assert labels["O_r3"] == "X" and labels["O_r4"] == "Y"  # products 2 X, 2 Y
    assert labels["HS_X"] == "X" and labels["HS_B"] is None
    for s, role in imp.roles.items():
        if role in ("fuel", "waste"):
            assert s not in labels
            assert imp.network.species_label[imp.network.index[s]] == IGNORED


def test_outputs_without_products_stay_ignored_and_the_rule_is_one_function():
    """A toy formal network: X + Y -> 0 and Z + X -> Y. First reactants (the smaller
    first-step load, ties in network order): X for reaction 1, then Z for reaction 2, so
    H_r1 holds X and H_r2 holds Z. O_r1 releases nothing (no products): a waste, ignored;
    O_r2 stands for its product Y. Y, first reactant of nothing, is buffered: HS_Y holds
    Y. The Builder's labels are exactly those of crn.dna.labels.decision_labels."""
    formal = Network.from_reactions(
        "toy", ["X", "Y", "Z"],
        [Reaction({"X": 1, "Y": 1}, {}, 1.0), Reaction({"Z": 1, "X": 1}, {"Y": 1}, 1.0)],
        volume=10, initial={"X": 5, "Y": 4, "Z": 1}, output={"X": "x", "Y": "y", "Z": "z"})
    imp = implement(formal, "ssw", PARAMS)
    labels = imp.decision_labels
    assert labels["H_r1"] == "x" and labels["H_r2"] == "z"
    assert imp.roles["O_r1"] == "waste" and "O_r1" not in labels
    assert labels["O_r2"] == "y" and labels["HS_Y"] == "y"
    raw = decision_labels(formal, imp.roles, imp.strands, imp.modules,
                          list(imp.network.reactions()))
    assert {s: v for s, v in raw.items() if v != "ignore"} == labels
    assert {s for s, v in raw.items() if v == "ignore"} == set(imp.network.ignored)


def test_text_shows_what_each_intermediate_counts_as():
    from click.testing import CliRunner

    from crn.cli import cli

    result = CliRunner().invoke(cli, ["implement", AM, "--set", "n=100", "--set", "gap=10"])
    assert result.exit_code == 0, result.output
    assert DECISION_RULE in result.stdout
    line = next(x for x in result.stdout.splitlines() if x.startswith("intermediate"))
    assert "H_r1 [counts as X]" in line and "O_r1 [no label]" in line
    waste = next(x for x in result.stdout.splitlines() if x.startswith("waste"))
    assert "[" not in waste
    help_text = CliRunner().invoke(cli, ["implement", "--help"]).output
    assert "intermediate" in help_text and "ignored" in help_text


def test_sbml_export_keeps_the_decision_labels(tmp_path):
    """Exported with --to sbml and read back: labels and ignored species survive."""
    out = tmp_path / "impl.xml"
    assert main(["implement", AM, "--set", "n=100", "--set", "gap=10", "--to", "sbml",
                 "-o", str(out)]) == 0
    back = network_from_sbml(out.read_text())
    imp = implement(_am(), "ssw", PARAMS)
    assert back.labels == imp.network.labels
    assert np.array_equal(back.species_label, imp.network.species_label)
    again = network_from_sbml(network_to_sbml(back))
    assert again.ignored == imp.network.ignored
