"""The shared definition of consensus and of the right answer."""

import numpy as np

from crn.core.outcome import (
    TIE,
    RunOutcome,
    consensus_index,
    correct_label,
    mean_field_consensus_index,
    tally,
)
from crn.io.models import load_model

MODELS = "models"


def _am(n=20, gap=4):
    return load_model(f"{MODELS}/approximate_majority.toml", {"n": n, "gap": gap}).network


def test_consensus_needs_every_present_molecule_to_report_the_same_label():
    net = _am()  # species X, Y, B; X -> "X", Y -> "Y", B reports nothing
    labels = net.species_label
    assert consensus_index(labels, np.array([20, 0, 0])) == net.labels.index("X")
    assert consensus_index(labels, np.array([0, 20, 0])) == net.labels.index("Y")
    assert consensus_index(labels, np.array([19, 0, 1])) == -1  # a blank breaks consensus
    assert consensus_index(labels, np.array([19, 1, 0])) == -1
    assert consensus_index(labels, np.array([0, 0, 0])) == -1


def test_mean_field_consensus_is_fewer_than_one_other_molecule():
    net = _am()
    labels, k = net.species_label, len(net.labels)
    n = 1000
    # docs/design.md: others must add up to fewer than one molecule (fraction < 1/n)
    assert mean_field_consensus_index(labels, k, np.array([1 - 0.9 / n, 0, 0.9 / n]), n) == 0
    assert mean_field_consensus_index(labels, k, np.array([1 - 1.1 / n, 0.6 / n, 0.5 / n]), n) == -1
    assert mean_field_consensus_index(labels, k, np.array([0.2 / n, 1 - 0.2 / n, 0]), n) == 1
    # exactly one other molecule is not fewer than one (n = 6: 5 X and 1 Y)
    assert mean_field_consensus_index(labels, k, np.array([5 / 6, 1 / 6, 0.0]), 6) == -1


def test_correct_label_is_the_larger_input_or_tie():
    assert correct_label(_am(20, 4)) == "X"
    assert correct_label(_am(20, 0)) == TIE
    net = _am(20, 4)
    assert correct_label(net, np.array([8, 12, 0])) == "Y"


def test_run_outcome_from_indices_and_tally():
    net = _am()
    done = RunOutcome.from_indices(net, 0, 3.5, 0)
    assert (done.label, done.time, done.final_label, done.held) == ("X", 3.5, "X", True)
    never = RunOutcome.from_indices(net, -1, float("nan"), -1)
    assert (never.label, never.time, never.held) == (None, None, False)
    assert tally(["X", None, "X", "Y"]) == {"X": 2, "none": 1, "Y": 1}


def test_mean_field_has_no_consensus_when_no_molecule_reports_a_label():
    net = _am()
    # derived: nothing but blanks, and fewer than one of them: no label has a carrier
    assert mean_field_consensus_index(net.species_label, 2, np.array([0.0, 0.0, 0.5 / 1000]),
                                      1000) == -1
