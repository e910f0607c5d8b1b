"""Monotone protocols: the certificate, checked against exact chains, and implied regime cells.

The certificate's claim (a monotone coupling: a dominating start settles on the
top label at least as often, for every horizon) is checked against exact
absorption probabilities of random three-state protocols (references:
Lindvall, "Lectures on the Coupling Method", 1992, ch. IV, for the coupling;
the exact chain of crn.solvers.exact for the numbers).
"""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from click.testing import CliRunner
from seeds import seed

from crn.analyses.monotone import implies, monotone_order
from crn.analyses.probes import InitialSplit
from crn.analyses.regimes import RegimeCell, regime_map
from crn.cli import cli
from crn.core.protocol import Outcome, Protocol
from crn.core.translate import protocol_to_network
from crn.io.models import load_model
from crn.solvers.exact import exact_outcomes

STATES = ("X", "Y", "B")


def _random_protocol(rng) -> Protocol:
    """A deterministic protocol on X, Y, B: each ordered pair null or one of the 9 outcomes."""
    transitions = {}
    for p, q in itertools.product(STATES, STATES):
        k = int(rng.integers(0, 12))
        if k < 9:
            a, b = STATES[k // 3], STATES[k % 3]
            if (a, b) != (p, q):
                transitions[(p, q)] = (Outcome(a, b),)
    return Protocol("random", STATES, transitions, {"X": 1, "Y": 1},
                    {"X": "X", "Y": "Y"}, majority=("X", "Y"))


def _settles_on_x(net, counts) -> float:
    result = exact_outcomes(net.with_initial(np.array(counts, dtype=np.int64)), absorb="first")
    return float(result.probabilities.get("X", 0.0))


def _starts(n: int):
    return [(x, y, n - x - y) for x in range(n + 1) for y in range(n + 1 - x)]


def _violations(net, order_names, n: int = 5) -> int:
    """Pairs of starts where the dominating one settles first on X less often (exact)."""
    index = [STATES.index(s) for s in order_names]
    settle = {c: _settles_on_x(net, c) for c in _starts(n)}
    bad = 0
    for up, low in itertools.permutations(settle, 2):
        above_up = np.cumsum(np.array(up)[index][::-1])
        above_low = np.cumsum(np.array(low)[index][::-1])
        # 1e-9: far above the exact solver's residuals (about 1e-11), far below any real gap
        if np.all(above_up >= above_low) and settle[up] < settle[low] - 1e-9:
            bad += 1
    return bad


def test_approximate_majority_is_certified_with_blank_in_the_middle():
    # order worked out by hand from the four rules of Angluin, Aspnes, Eisenstat 2008
    # (an opinion blanks the other, a blank adopts): every pair keeps Y < B < X
    net = load_model("models/approximate_majority.toml").network
    assert monotone_order(net, "X").order == ("Y", "B", "X")
    assert monotone_order(net, "Y").order == ("X", "B", "Y")


def test_certified_random_protocols_are_monotone_in_the_exact_chain():
    rng = np.random.default_rng(seed(2026))
    certified = uncertified_violating = 0
    while certified < 8:
        net = protocol_to_network(_random_protocol(rng))
        order = monotone_order(net, "X")
        if order is None:
            if uncertified_violating == 0 and _violations(net, ("Y", "B", "X")) > 0:
                uncertified_violating += 1
            continue
        certified += 1
        assert _violations(net, order.order) == 0, net.reactions()
    # the check can fail: some protocol without a certificate breaks monotonicity
    assert uncertified_violating == 1


def test_protocol_where_more_x_turns_to_y_has_no_certificate():
    transitions = {("X", "X"): (Outcome("Y", "Y"),), ("X", "Y"): (Outcome("Y", "Y"),)}
    net = protocol_to_network(Protocol("turncoat", ("X", "Y"), transitions, {"X": 3, "Y": 1},
                                       {"X": "X", "Y": "Y"}, majority=("X", "Y")))
    assert monotone_order(net, "X") is None
    assert monotone_order(net, "Y") is None  # X's consensus is left: X, X -> Y, Y


def test_randomized_protocol_has_no_certificate():
    # the check covers deterministic protocols only (a pair with a coin flip is left out)
    transitions = {("X", "Y"): (Outcome("X", "X", 0.3),), ("Y", "Y"): (Outcome("X", "Y", 0.5),)}
    net = protocol_to_network(Protocol("coin", ("X", "Y"), transitions, {"X": 3, "Y": 1},
                                       {"X": "X", "Y": "Y"}, majority=("X", "Y")))
    assert monotone_order(net, "X") is None


def test_implication_needs_a_dominating_start_and_the_same_protocol():
    net = load_model("models/approximate_majority.toml").network
    split = InitialSplit(net)
    assert implies(split(1000, 10), split(1000, 50), "X") is not None
    assert implies(split(1000, 50), split(1000, 10), "X") is None  # fewer X: not implied
    voter = load_model("models/voter.toml").network
    assert implies(split(1000, 10), InitialSplit(voter)(1000, 50), "X") is None


def test_implied_cells_keep_the_flags_of_a_full_map_with_fewer_runs():
    net = load_model("models/approximate_majority.toml").network
    fractions = [0.003, 0.03, 0.1, 0.3]
    fast = regime_map(InitialSplit(net), [3000], gap_fractions=fractions, rng=seed(11))
    full = regime_map(InitialSplit(net), [3000], gap_fractions=fractions, rng=seed(11),
                      monotone=False)
    assert [c.flag for c in fast.cells] == [c.flag for c in full.cells]
    assert [c.time_flag for c in fast.cells] == [c.time_flag for c in full.cells]
    implied = [c for c in fast.cells if c.implied_by is not None]
    assert implied and sum(c.runs for c in fast.cells) < sum(c.runs for c in full.cells)
    decider = next(c for c in fast.cells if c.gap == implied[0].implied_by)
    for cell in implied:
        assert cell.gap > decider.gap and cell.runs == 50 and cell.flag == "ok"
        assert cell.high == decider.high and cell.horizon == decider.horizon
        assert RegimeCell.from_dict(cell.to_dict()) == cell
    # cells before the decider are the full map's, number for number
    for a, b in zip(fast.cells, full.cells, strict=True):
        if a.gap <= decider.gap:
            assert a == b


def test_resumed_row_uses_a_finished_ok_cell_as_decider():
    net = load_model("models/approximate_majority.toml").network
    fractions = [0.1, 0.3]
    first = regime_map(InitialSplit(net), [3000], gap_fractions=fractions[:1], rng=seed(5))
    assert first.cells[0].flag == "ok"
    done = {(c.n, c.gap): c for c in first.cells}
    resumed = regime_map(InitialSplit(net), [3000], gap_fractions=fractions, rng=seed(5), done=done)
    assert resumed.cells[0] == first.cells[0]
    assert resumed.cells[1].implied_by == first.cells[0].gap


@pytest.mark.parametrize("workers", [1, 2])
def test_rows_give_the_same_cells_on_one_or_two_workers(workers):
    net = load_model("models/approximate_majority.toml").network
    result = regime_map(InitialSplit(net), [200, 6000], gap_fractions=[0.05, 0.3], rng=seed(3),
                        workers=workers)
    reference = regime_map(InitialSplit(net), [200, 6000], gap_fractions=[0.05, 0.3], rng=seed(3))
    assert result.cells == reference.cells


def test_cli_marks_implied_cells_and_samples_every_cell_on_request():
    args = ["regimes", "models/approximate_majority.toml", "--n", "3000", "--gap-fractions",
            "0.1,0.3", "--seed", str(seed(7))]
    runner = CliRunner()
    fast = runner.invoke(cli, [*args, "--json"], catch_exceptions=False)
    full = runner.invoke(cli, [*args, "--json", "--sample-every-cell"], catch_exceptions=False)
    fast_cells, full_cells = json.loads(fast.output)["cells"], json.loads(full.output)["cells"]
    assert [c["flag"] for c in fast_cells] == [c["flag"] for c in full_cells] == ["ok", "ok"]
    assert fast_cells[1]["implied_by"] == fast_cells[0]["gap"] and fast_cells[1]["runs"] == 50
    assert all(c["implied_by"] is None for c in full_cells) and full_cells[1]["runs"] == 400
    text = runner.invoke(cli, args, catch_exceptions=False).output
    assert f"implied by gap {fast_cells[0]['gap']}" in text
