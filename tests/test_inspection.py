"""Static inspection (crn check) as a library call."""

from crn.analyses.inspection import check_model, reachable_species
from crn.core.model import Model
from crn.core.network import Network, Reaction


def test_reachability_is_the_closure_under_reactions_with_positive_rate():
    # A -> B -> C fire in turn; D + A needs D, which nothing makes; B -> E has rate 0
    net = Network.from_reactions("chain", ["A", "B", "C", "D", "E", "F"], [
        Reaction({"A": 1}, {"B": 1}, 1.0),
        Reaction({"B": 1}, {"C": 1}, 1.0),
        Reaction({"D": 1, "A": 1}, {"F": 1}, 1.0),
        Reaction({"B": 1}, {"E": 1}, 0.0),
    ], initial={"A": 1})
    assert reachable_species(net) == {"A", "B", "C"}
    assert reachable_species(net, start=["D", "A"]) == {"A", "B", "C", "D", "F"}
    report = check_model(Model("chain", "", "<test>", {}, net))
    assert report.unreachable == ("D", "E", "F")
    assert [r.can_fire for r in report.rules] == [True, True, False, False]
    assert report.rules[2].unreachable_reactants == ("D",)
    assert [r.net_change for r in report.rules] == [0, 0, -1, 0]
    assert any("probability (rate) 0" in w for w in report.warnings)
