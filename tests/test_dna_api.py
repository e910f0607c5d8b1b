"""The DNA layer API: ignored species in the consensus rule, parameters, the ssw scheme."""

import numpy as np
import pytest

from crn.core.network import IGNORED, Network, Reaction
from crn.core.outcome import consensus_index, mean_field_consensus_index
from crn.dna import SCHEMES, DnaParameterError, DnaParameters, implement, toehold_rate
from crn.engines.direct import run_direct
from crn.io.contract import network_from_dict, network_to_dict
from crn.io.models import load_model
from crn.solvers.ode import solve_mean_field


def _am(n=100, gap=10):
    return load_model("models/approximate_majority.toml", {"n": n, "gap": gap}).network


def _with_fuel():
    """A toy network: X reports x, Y reports y, F is ignored, U reports nothing."""
    return Network.from_reactions(
        "toy", ["X", "Y", "F", "U"],
        [Reaction({"Y": 1, "F": 1}, {"X": 1, "F": 1}, 1.0)],
        volume=10, initial={"X": 5, "Y": 5, "F": 10},
        output={"X": "x", "Y": "y"}, ignore=["F"])


def test_ignored_species_neither_report_nor_block_consensus():
    net = _with_fuel()
    assert net.ignored == ("F",)
    assert net.species_label[net.index["F"]] == IGNORED
    labels = net.species_label
    assert consensus_index(labels, np.array([5, 0, 10, 0])) == 0  # F present, still consensus
    assert consensus_index(labels, np.array([5, 0, 10, 1])) == -1  # U (reports nothing) blocks
    assert consensus_index(labels, np.array([0, 0, 10, 0])) == -1  # only ignored: no label
    y = np.array([0.5, 0.05, 100.0, 0.0])  # 0.5 other molecules at volume 10
    assert mean_field_consensus_index(labels, 2, y, 10.0) == 0
    assert mean_field_consensus_index(labels, 2, np.array([0.5, 0.0, 1.0, 0.2]), 10.0) == -1


def test_ignored_species_in_the_engines_and_the_json_contract():
    net = _with_fuel()
    run = run_direct(net, until=100.0, rng=1, stop_at_consensus=True)
    assert run.outcome.label == "x"  # F (10 molecules throughout) never blocks
    ode = solve_mean_field(net, until=100.0)
    assert ode.consensus.label == "x"
    back = network_from_dict(network_to_dict(net))
    assert back.ignored == ("F",)
    assert "ignore" not in network_to_dict(_am())  # formal networks: contract unchanged


def test_an_ignored_species_cannot_report_a_label():
    from crn.core.errors import ModelError

    with pytest.raises(ModelError, match="cannot be ignored"):
        Network.from_reactions("bad", ["X"], [], output={"X": "x"}, ignore=["X"])


def test_parameters_validate_and_name_the_field():
    for kwargs, field in [({"rate": 0, "concentration": 1e-8}, "rate"),
                          ({"rate": 1e5, "concentration": -1}, "concentration"),
                          ({"rate": 1e5, "concentration": 1e-8, "fuel": 0.0}, "fuel"),
                          ({"rate": 1e5, "concentration": 1e-8, "fuel": 1e-9}, "fuel"),
                          ({"rate": 1e5, "concentration": 1e-8, "leak": -1.0}, "leak"),
                          ({"rate": 1e5, "concentration": 1e-8, "max_rate": 1e6,
                            "toehold": 5}, "toehold"),
                          ({"rate": 1e5, "concentration": 1e-8, "toehold": -1}, "toehold")]:
        with pytest.raises(DnaParameterError) as err:
            DnaParameters(**kwargs)
        assert err.value.field == field
        assert isinstance(err.value, ValueError)
    p = DnaParameters(rate=1e5, concentration=1e-8)
    assert p.fuel_molar == pytest.approx(1e-6)  # documented default: 100 x C
    assert p.q_max == toehold_rate(7)


def test_toehold_rate_rises_a_decade_per_nucleotide_then_saturates():
    # from memory: Zhang & Winfree, JACS 131:17303, 2009 (about 10x per nt, plateau ~6e6 /M/s)
    assert toehold_rate(3) / toehold_rate(2) == pytest.approx(10.0)
    assert toehold_rate(7) == toehold_rate(12) == pytest.approx(6e6)


def test_ssw_roles_units_and_fuel_counts():
    net = _am(n=100)
    p = DnaParameters(rate=1e5, concentration=1e-8, fuel=1e-6, max_rate=1e7)
    imp = implement(net, "ssw", p)
    assert set(SCHEMES) >= {"ssw"}
    assert set(imp.roles.values()) <= {"signal", "fuel", "intermediate", "waste"}
    assert [s for s in imp.network.species if imp.roles[s] == "signal"] == list(net.species)
    # the decision rule (crn.dna.labels): fuel and waste are ignored, signals never;
    # intermediates count as what they hold (tests/test_dna_labels.py)
    ignored = set(imp.network.ignored)
    assert {s for s, r in imp.roles.items() if r in ("fuel", "waste")} <= ignored
    assert not ignored & set(net.species)
    assert set(imp.decision_labels) == set(imp.network.species) - ignored
    # derived: 1e-6 M fuel at v / C = 99 / 1e-8 molecules per M -> 9900 molecules
    for s in imp.fuel:
        assert imp.network.initial[imp.network.index[s]] == 9900
    # derived: a bimolecular constant q /M/s is q / rate in formal units
    for r, q in zip(imp.network.reactions(), imp.physical_rates, strict=True):
        assert r.rate == pytest.approx(q / 1e5)
    assert imp.network.majority == net.majority and imp.network.labels == net.labels
    assert {s: v for s, v in imp.network.output.items() if s in net.species} == net.output
    assert imp.fuel_remaining(imp.network.initial) == {s: 1.0 for s in imp.fuel}


def test_impossible_rate_is_an_error_not_a_zero():
    net = _am(n=100)
    with pytest.raises(DnaParameterError) as err:
        implement(net, "ssw", DnaParameters(rate=1e7, concentration=1e-8, max_rate=1e6))
    assert err.value.field == "rate"
