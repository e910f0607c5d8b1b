"""The model files in models/: they load, say where they are published, and mean what they say."""

from pathlib import Path

import numpy as np
import pytest

from crn.core.errors import ModelError
from crn.core.model import parse_model
from crn.core.network import propensities
from crn.io.models import load_model

MODELS = Path(__file__).resolve().parent.parent / "models"


def reaction_set(net, rename=None):
    rename = rename or {}

    def side(s):
        return tuple(sorted((rename.get(k, k), m) for k, m in s.items()))

    return sorted((side(r.reactants), side(r.products), r.rate) for r in net.reactions())


@pytest.mark.parametrize("path", sorted(MODELS.glob("*.toml")) + sorted(MODELS.glob("*.py")),
                         ids=lambda p: p.name)
def test_every_model_loads_and_says_what_it_is(path):
    model = load_model(path)
    assert model.network.n_reactions > 0
    assert len(model.about.split()) >= 10


PUBLISHED = ["approximate_majority.toml", "epidemic.toml", "undecided_state.toml",
             "exact_majority.toml", "voter.toml", "exact_majority_records.py", "birth_death.toml"]


@pytest.mark.parametrize("name", PUBLISHED)
def test_published_models_name_their_source(name):
    # the about text names the publication: at least a year of publication
    about = load_model(MODELS / name).about
    assert any(str(year) in about for year in range(1970, 2030))


def test_approximate_majority_translation():
    # Angluin, Aspnes, Eisenstat 2008: X, Y -> X, B; Y, X -> Y, B; X, B -> X, X; Y, B -> Y, Y.
    # derived: both X,Y orders blank the responder, giving two reactions X + Y -> X + B and
    # X + Y -> Y + B of rate 1 each; volume n - 1.
    model = load_model(MODELS / "approximate_majority.toml", {"n": 100, "gap": 4})
    net = model.network
    assert net.species == ("X", "Y", "B")
    assert list(net.initial) == [52, 48, 0]
    assert net.volume == 99
    assert reaction_set(net) == sorted([
        ((("X", 1), ("Y", 1)), (("B", 1), ("X", 1)), 1.0),
        ((("X", 1), ("Y", 1)), (("B", 1), ("Y", 1)), 1.0),
        ((("B", 1), ("X", 1)), (("X", 2),), 1.0),
        ((("B", 1), ("Y", 1)), (("Y", 2),), 1.0),
    ])
    assert net.majority == ("X", "Y")
    assert net.output == {"X": "X", "Y": "Y"}


def test_set_overrides_reach_parameters_that_depend_on_them():
    text = """
name = "dep"
[parameters]
n = 10
half = "n // 2"
[initial]
A = "half"
B = "n - half"
[protocol]
transitions = ["A, B -> A, A"]
"""
    model = parse_model(text, overrides={"n": 40})
    assert list(model.network.initial) == [20, 20]


def test_record_model_gives_the_four_state_exact_majority_network():
    table = load_model(MODELS / "exact_majority.toml", {"n": 30, "gap": 4}).network
    records = load_model(MODELS / "exact_majority_records.py", {"n": 30, "gap": 4}).network
    rename = {"A_strong": "A", "B_strong": "B", "A_weak": "a", "B_weak": "b"}
    assert sorted(rename[s] for s in records.species) == sorted(table.species)
    assert reaction_set(records, rename) == reaction_set(table)
    assert {rename[s]: c for s, c in zip(records.species, records.initial, strict=True)} == {
        s: c for s, c in zip(table.species, table.initial, strict=True)}
    assert records.volume == table.volume == 29
    assert {rename[s]: label for s, label in records.output.items()} == table.output
    assert tuple(rename[s] for s in records.majority) == table.majority


def test_record_model_refuses_odd_splits():
    with pytest.raises(ModelError, match="n \\+ gap must be even"):
        load_model(MODELS / "exact_majority_records.py", {"n": 31, "gap": 4})


def test_birth_death_is_a_network_with_the_documented_propensities():
    # derived (birth-death): at volume 1, 0 -> X fires at `birth`, X -> 0 at
    # death * x; stationary mean birth / death.
    model = load_model(MODELS / "birth_death.toml", {"birth": 6.0, "death": 2.0, "x0": 3})
    net = model.network
    assert model.kind == "network" and not net.from_protocol
    assert list(net.initial) == [3]
    np.testing.assert_allclose(propensities(net, [5]), [6.0, 10.0])


def test_epidemic_is_symmetric():
    # derived: both orders infect, so one reaction I + S -> 2 I of rate 2
    net = load_model(MODELS / "epidemic.toml", {"n": 10}).network
    assert reaction_set(net) == [((("I", 1), ("S", 1)), (("I", 2),), 2.0)]
    assert list(net.initial) == [1, 9]


def test_json_and_sbml_exports_load_as_models(tmp_path):
    from crn.io.exports import write_network

    net = load_model(MODELS / "undecided_state.toml", {"n": 20, "gap": 2}).network
    for fmt, suffix in (("json", ".json"), ("sbml", ".xml")):
        path = tmp_path / f"usd{suffix}"
        write_network(net, fmt, path)
        again = load_model(path).network
        assert reaction_set(again) == reaction_set(net)
        assert again.output == net.output and again.volume == net.volume
        with pytest.raises(ModelError, match="unknown parameter 'n'"):
            load_model(path, {"n": 3})


def test_rules_and_reactions_that_never_fire_are_warned_about():
    from crn.core.model import ModelWarning, parse_model

    protocol = ('name = "p"\n[initial]\nX = 2\nY = 2\n[protocol]\n'
                'transitions = [{ rule = "X, Y -> X, X", p = 0 }]\n')
    with pytest.warns(ModelWarning, match=r"m.toml:6 \[protocol.transitions\[0\]\].*never fires"):
        parse_model(protocol, source="m.toml")
    network = ('name = "n"\n[initial]\nX = 2\n[network]\n'
               'reactions = [{ reaction = "X -> 0", rate = 0 }]\n')
    with pytest.warns(ModelWarning, match=r"rate 0 and never fires"):
        parse_model(network, source="n.toml")
