"""Exports (text, JSON, LaTeX, SBML) and imports (JSON, SBML) of networks."""

from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from crn.core.errors import CRNError, ModelError
from crn.core.network import Network, Reaction, propensities
from crn.io.atomic import write_atomic
from crn.io.contract import network_from_json, network_to_dict, network_to_json
from crn.io.exports import export_network
from crn.io.latex import network_to_latex
from crn.io.models import load_model
from crn.io.sbml import network_from_sbml, network_to_sbml, sbml_consistency
from crn.io.text import network_to_text

MODELS = Path(__file__).resolve().parent.parent / "models"
TOML_MODELS = sorted(MODELS.glob("*.toml"))


def approximate_majority():
    return load_model(MODELS / "approximate_majority.toml", {"n": 100, "gap": 4}).network


def same_network(a: Network, b: Network):
    """Identical as data: names, species order, reactions in order, rates, volume, decisions."""
    assert network_to_dict(a) == network_to_dict(b)
    np.testing.assert_array_equal(a.rates, b.rates)
    np.testing.assert_array_equal(a.initial, b.initial)


@st.composite
def networks(draw):
    """Random networks of orders 0 to 3 with awkward rates and volumes."""
    k = draw(st.integers(1, 4))
    species = ["A", "B", "C", "D"][:k]
    side = st.dictionaries(st.sampled_from(species), st.integers(1, 2), max_size=2)
    rate = st.floats(1e-9, 1e6, allow_nan=False, allow_infinity=False)
    reactions = []
    for _ in range(draw(st.integers(1, 5))):
        reactants = draw(side)
        if sum(reactants.values()) > 3:
            continue
        reactions.append(Reaction(reactants, draw(side), draw(rate)))
    initial = {s: draw(st.integers(0, 10**12)) for s in species}
    volume = draw(st.floats(1e-3, 1e9, allow_nan=False))
    return Network.from_reactions("random net", species, reactions, volume=volume,
                                  initial=initial)


# -- text and LaTeX ---------------------------------------------------------------------------


def test_text_export_of_approximate_majority():
    # expected output written by hand from the model file (n = 100, gap = 4: X = 52, Y = 48,
    # volume n - 1 = 99, every rule of probability 1)
    assert network_to_text(approximate_majority()) == (
        "# three-state approximate majority\n"
        "# volume 99\n"
        "# initial X = 52, Y = 48, B = 0\n"
        "X + Y -> X + B   rate 1\n"
        "X + Y -> Y + B   rate 1\n"
        "X + B -> 2 X     rate 1\n"
        "Y + B -> 2 Y     rate 1\n"
    )


def test_latex_export_of_approximate_majority():
    assert network_to_latex(approximate_majority()) == (
        "\\begin{align*}\n"
        "  \\mathrm{X} + \\mathrm{Y} &\\xrightarrow{1} \\mathrm{X} + \\mathrm{B} \\\\\n"
        "  \\mathrm{X} + \\mathrm{Y} &\\xrightarrow{1} \\mathrm{Y} + \\mathrm{B} \\\\\n"
        "  \\mathrm{X} + \\mathrm{B} &\\xrightarrow{1} 2\\,\\mathrm{X} \\\\\n"
        "  \\mathrm{Y} + \\mathrm{B} &\\xrightarrow{1} 2\\,\\mathrm{Y}\n"
        "\\end{align*}\n"
    )


def test_latex_escapes_names_and_writes_empty_sides_and_powers_of_ten():
    net = Network.from_reactions("bd", ["X_1"], [Reaction({}, {"X_1": 1}, 2.5e-7),
                                                  Reaction({"X_1": 1}, {}, 1e-3)])
    text = network_to_latex(net)
    assert "\\varnothing &\\xrightarrow{2.5 \\times 10^{-7}} \\mathrm{X\\_1}" in text
    assert "\\mathrm{X\\_1} &\\xrightarrow{0.001} \\varnothing" in text


# -- JSON -------------------------------------------------------------------------------------


def test_json_contract_keys_and_values_for_approximate_majority():
    data = network_to_dict(approximate_majority())
    assert data["species"] == ["X", "Y", "B"]
    assert data["initial"] == {"X": 52, "Y": 48, "B": 0}
    assert data["volume"] == 99
    assert data["reactions"][2] == {"reactants": {"X": 1, "B": 1}, "products": {"X": 2},
                                    "rate": 1}


@settings(max_examples=40, deadline=None)
@given(networks())
def test_json_round_trip_is_identical(net):
    same_network(network_from_json(network_to_json(net)), net)


@pytest.mark.parametrize("text, field", [
    ('{"species": ["A"], "reactions": [{"reactants": {"A": 0}, "products": {}, "rate": 1}]}',
     "reactions[0].reactants"),
    ('{"species": ["A"], "reactions": [{"reactants": {}, "products": {}, "rate": "x"}]}',
     "reactions[0].rate"),
    ('{"species": ["A"], "initial": {"A": -1}, "reactions": []}', "initial.A"),
    ('{"species": "A", "reactions": []}', "species"),
])
def test_json_import_names_the_bad_field(text, field):
    with pytest.raises(ModelError, match=field.replace("[", r"\[").replace("]", r"\]")):
        network_from_json(text, source="net.json")


def test_json_import_reports_the_line_of_malformed_json():
    with pytest.raises(ModelError, match=r"net.json:2: malformed JSON"):
        network_from_json('{"species": [],\n "reactions": [,]}', source="net.json")


# -- SBML -------------------------------------------------------------------------------------


@pytest.mark.parametrize("path", TOML_MODELS, ids=lambda p: p.stem)
def test_sbml_of_every_model_is_consistent_and_round_trips(path):
    net = load_model(path).network
    text = network_to_sbml(net)
    errors, warnings = sbml_consistency(text)
    assert errors == []
    assert warnings == []  # units are declared, so libsbml can check them all
    same_network(network_from_sbml(text), net)


@settings(max_examples=30, deadline=None)
@given(networks())
def test_sbml_round_trip_of_random_networks(net):
    text = network_to_sbml(net)
    assert sbml_consistency(text)[0] == []
    same_network(network_from_sbml(text), net)


def test_sbml_round_trip_survives_name_clashes_with_generated_ids():
    # species named like the ids the export generates for rates, reactions and compartment
    net = Network.from_reactions("k1", ["k1", "R1", "volume"], [
        Reaction({"k1": 1, "R1": 1}, {"volume": 2}, 0.25)], volume=3.0,
        initial={"k1": 1, "R1": 2})
    text = network_to_sbml(net)
    assert sbml_consistency(text)[0] == []
    same_network(network_from_sbml(text), net)


def _sbml(species_xml: str, law: str, reactants: str, compartment_size: float = 2.0,
          extra: str = "") -> str:
    return f"""<?xml version="1.0" encoding="UTF-8"?>
<sbml xmlns="http://www.sbml.org/sbml/level3/version2/core" level="3" version="2">
  <model id="plain" name="plain">
    <listOfCompartments>
      <compartment id="c" size="{compartment_size}" constant="true"/>
    </listOfCompartments>
    <listOfSpecies>{species_xml}</listOfSpecies>
    <listOfParameters>
      <parameter id="k" value="0.5" constant="true"/>
      <parameter id="Km" value="3" constant="true"/>
    </listOfParameters>
    <listOfReactions>
      <reaction id="bind" reversible="false">
        <listOfReactants>{reactants}</listOfReactants>
        <listOfProducts><speciesReference species="C" stoichiometry="1" constant="true"/>
        </listOfProducts>
        <kineticLaw>{law}</kineticLaw>
      </reaction>
    </listOfReactions>{extra}
  </model>
</sbml>"""


def _species(amounts: bool) -> str:
    flag = "true" if amounts else "false"
    value = 'initialAmount="4"' if amounts else 'initialConcentration="2"'
    return "".join(
        f'<species id="{s}" compartment="c" {value} hasOnlySubstanceUnits="{flag}" '
        f'boundaryCondition="false" constant="false"/>' for s in "ABC")


def _math(formula: str) -> str:
    import libsbml

    return libsbml.writeMathMLToString(libsbml.parseL3Formula(formula)).split("?>", 1)[1]


AB = ('<speciesReference species="A" stoichiometry="1" constant="true"/>'
      '<speciesReference species="B" stoichiometry="1" constant="true"/>')
AA = '<speciesReference species="A" stoichiometry="2" constant="true"/>'


@pytest.mark.parametrize("amounts, formula, reactants, rate", [
    # amounts: the law is the propensity; k * a * b / V means rate constant k
    (True, "k * A * B / c", AB, 0.5),
    (True, "k * A * (A - 1) / c", AA, 0.5),
    # plain k * A * B in amounts has no 1/V: our constant is k * V (V = 2)
    (True, "k * A * B", AB, 1.0),
    # concentrations: c * k * [A][B] = k a b / V, the deterministic mass-action law
    (False, "c * k * A * B", AB, 0.5),
    (False, "c * k * A^2", AA, 0.5),
])
def test_sbml_import_of_plain_mass_action(amounts, formula, reactants, rate):
    net = network_from_sbml(_sbml(_species(amounts), _math(formula), reactants))
    assert [dict(r.reactants) for r in net.reactions()] == [
        {"A": 1, "B": 1} if reactants == AB else {"A": 2}]
    assert net.rates[0] == pytest.approx(rate, rel=1e-15)
    assert net.volume == 2.0
    assert list(net.initial) == [4, 4, 4]  # initialAmount 4, or concentration 2 in size 2


@pytest.mark.parametrize("formula", ["k * A * B / (Km + A)", "k * A", "k * A * B * C / c",
                                     "k * exp(A)", "k * A * B - 0.1 * C"])
def test_sbml_import_refuses_other_kinetic_laws_naming_the_reaction(formula):
    text = _sbml(_species(True), _math(formula), AB)
    with pytest.raises(ModelError, match=r"reaction bind: kinetic law .* is not mass action") \
            as info:
        network_from_sbml(text, source="in.xml")
    assert "\n" not in str(info.value)
    assert str(info.value).startswith("in.xml")


def test_sbml_import_refuses_rules_and_several_compartments():
    rule = ('\n    <listOfRules><assignmentRule variable="k"><math '
            'xmlns="http://www.w3.org/1998/Math/MathML"><cn>1</cn></math></assignmentRule>'
            '</listOfRules>')
    text = _sbml(_species(True), _math("k * A * B / c"), AB, extra=rule).replace(
        'id="k" value="0.5" constant="true"', 'id="k" value="0.5" constant="false"')
    with pytest.raises(ModelError, match="rules"):
        network_from_sbml(text)


def test_sbml_import_refuses_garbage_with_one_line():
    with pytest.raises(ModelError, match="invalid SBML") as info:
        network_from_sbml("<sbml>not really", source="x.xml")
    assert "\n" not in str(info.value)


# -- the stochastic-simulation library of pyproject (GillesPy2) ---------------------------------


def _gillespy2_propensities(model, x: dict) -> np.ndarray:
    """Evaluate GillesPy2's own propensity strings the way its NumPy SSA solver does
    (solvers/numpy/ssa_solver.py: sanitized strings, ``V`` = volume, ``S`` = counts)."""
    species = model.sanitized_species_names()
    params = model.sanitized_parameter_names()
    env = {"V": float(model.volume), "S": [int(x[name]) for name in species]}
    for name, short in params.items():
        if name != "vol":
            env[short] = float(model.listOfParameters[name].value)
    return np.array([
        eval(r.sanitized_propensity_function(species, params), {"__builtins__": {}}, env)
        for r in model.listOfReactions.values()
    ])


def test_gillespy2_mass_action_convention_is_ours():
    # Checks the docs/design.md claim against the library itself (gillespy2 core/reaction.py,
    # _create_mass_action): 0 -> X is k * vol, X -> k * x, A + B -> k a b / vol and
    # 2 A -> k a (a - 1) / vol with no 1/2; the library refuses orders above 2.
    import gillespy2

    model = gillespy2.Model(name="conv", volume=7.0)
    model.add_species([gillespy2.Species(name=s, initial_value=0, mode="discrete")
                       for s in "AB"])
    k = gillespy2.Parameter(name="k", expression="0.3")
    model.add_parameter(k)
    model.add_reaction([
        gillespy2.Reaction(name="r0", reactants={}, products={"A": 1}, rate=k),
        gillespy2.Reaction(name="r1", reactants={"A": 1}, products={}, rate=k),
        gillespy2.Reaction(name="r2", reactants={"A": 1, "B": 1}, products={}, rate=k),
        gillespy2.Reaction(name="r3", reactants={"A": 2}, products={"B": 1}, rate=k),
    ])
    net = Network.from_reactions("conv", ["A", "B"], [
        Reaction({}, {"A": 1}, 0.3), Reaction({"A": 1}, {}, 0.3),
        Reaction({"A": 1, "B": 1}, {}, 0.3), Reaction({"A": 2}, {"B": 1}, 0.3)], volume=7.0)
    for a, b in [(0, 0), (1, 1), (2, 5), (9, 4)]:
        np.testing.assert_allclose(_gillespy2_propensities(model, {"A": a, "B": b}),
                                   propensities(net, [a, b]), rtol=1e-14)
    with pytest.raises(gillespy2.core.gillespyError.ReactionError):
        gillespy2.Reaction(name="r4", reactants={"A": 3}, products={}, rate=k)


def test_sbml_import_converted_to_gillespy2_gives_our_propensities_at_random_states():
    from crn.engines.gillespy2_bridge import to_gillespy2

    rng = np.random.default_rng(20240611)
    net = Network.from_reactions("mix", ["A", "B", "C"], [
        Reaction({"A": 1, "B": 1}, {"C": 2}, 0.37), Reaction({"A": 2}, {"B": 1}, 1.9),
        Reaction({"C": 1}, {}, 0.05), Reaction({}, {"A": 1}, 3.25),
        Reaction({"A": 2, "B": 1}, {"C": 1}, 0.8)], volume=13.5, initial={"A": 5, "B": 7})
    imported = network_from_sbml(network_to_sbml(net))
    model = to_gillespy2(imported)
    for x in rng.integers(0, 60, size=(50, 3)):
        ours = propensities(net, x)
        theirs = _gillespy2_propensities(model, dict(zip("ABC", x, strict=True)))
        np.testing.assert_allclose(theirs, ours, rtol=1e-12)


# -- files ------------------------------------------------------------------------------------


def test_unknown_format_is_refused():
    with pytest.raises(CRNError, match="unknown format 'pdf'"):
        export_network(approximate_majority(), "pdf")


def test_atomic_write_leaves_the_old_file_when_writing_fails(tmp_path, monkeypatch):
    target = tmp_path / "out.txt"
    target.write_text("old\n")

    def broken(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr("crn.io.atomic.os.replace", broken)
    with pytest.raises(CRNError, match="No space left"):
        write_atomic(target, "new\n")
    assert target.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_atomic_write_into_a_missing_folder_is_a_crn_error(tmp_path):
    with pytest.raises(CRNError, match="cannot write"):
        write_atomic(tmp_path / "nowhere" / "out.txt", "x")


def test_sbml_keeps_species_named_like_mathml_constants():
    # ids the infix formula parser would read as constants or csymbols must stay names
    names = ["pi", "time", "avogadro", "exponentiale", "true", "NaN", "inf"]
    net = Network.from_reactions("constants", names, [
        Reaction({"pi": 1, "time": 1}, {"avogadro": 2}, 0.5),
        Reaction({"exponentiale": 2}, {"true": 1}, 1.5),
        Reaction({"NaN": 1, "inf": 1, "pi": 1}, {}, 2.0)],
        volume=3.0, initial={s: i + 3 for i, s in enumerate(names)})
    text = network_to_sbml(net)
    assert "<pi/>" not in text and "csymbol" not in text
    assert sbml_consistency(text) == ([], [])
    same_network(network_from_sbml(text), net)
