"""SBML as modelling tools write it, on documents written by hand in the style of the examples of
the SBML specifications (Hucka et al., "SBML Level 3 Version 2 Core", 2019: section 4.5
Compartments, 4.6 Species, 4.7 Parameters, 4.11 Reactions with 4.11.3 SpeciesReference and 4.11.5
KineticLaw; section numbers from memory), and the export read back by an independent reader."""

import numpy as np
import pytest

from crn.core.errors import ModelError
from crn.core.network import Network, Reaction, propensities
from crn.io.sbml import network_from_sbml, network_to_sbml, sbml_consistency

NS = {(2, 1): "http://www.sbml.org/sbml/level2",
      (2, 4): "http://www.sbml.org/sbml/level2/version4",
      (3, 1): "http://www.sbml.org/sbml/level3/version1/core",
      (3, 2): "http://www.sbml.org/sbml/level3/version2/core"}
MATHML = "http://www.w3.org/1998/Math/MathML"


def document(body: str, level: int = 3, version: int = 2) -> str:
    return (f'<?xml version="1.0" encoding="UTF-8"?>\n<sbml xmlns="{NS[level, version]}" '
            f'level="{level}" version="{version}">\n<model id="droplet">\n{body}\n</model>\n'
            "</sbml>")


def law(formula: str) -> str:
    import libsbml

    return libsbml.writeMathMLToString(libsbml.parseL3Formula(formula)).split("?>", 1)[1]


def reaction(rid, reactants, products, formula, extra="", modifiers=""):
    def refs(side):
        return "".join(f'<speciesReference species="{s}" stoichiometry="{m}" constant="true"/>'
                       for s, m in side.items())

    parts = [f'<reaction id="{rid}" reversible="false">']
    if reactants:
        parts.append(f"<listOfReactants>{refs(reactants)}</listOfReactants>")
    if products:
        parts.append(f"<listOfProducts>{refs(products)}</listOfProducts>")
    if modifiers:
        parts.append(f"<listOfModifiers>{modifiers}</listOfModifiers>")
    parts.append(f"<kineticLaw>{law(formula)}{extra}</kineticLaw></reaction>")
    return "".join(parts)


def species(sid, compartment="cell", amount=None, concentration=None, only_amounts=True,
            boundary=False, constant=False):
    value = (f'initialAmount="{amount}"' if amount is not None
             else f'initialConcentration="{concentration}"' if concentration is not None else "")
    return (f'<species id="{sid}" compartment="{compartment}" {value} '
            f'hasOnlySubstanceUnits="{str(only_amounts).lower()}" '
            f'boundaryCondition="{str(boundary).lower()}" constant="{str(constant).lower()}"/>')


def model(compartments, species_xml, parameters, reactions, extra=""):
    params = "".join(f'<parameter id="{p}" value="{v}" constant="true"/>'
                     for p, v in parameters.items())
    return document(f"<listOfCompartments>{compartments}</listOfCompartments>"
                    f"<listOfSpecies>{species_xml}</listOfSpecies>"
                    + (f"<listOfParameters>{params}</listOfParameters>" if params else "")
                    + f"<listOfReactions>{reactions}</listOfReactions>{extra}")


SIZELESS = '<compartment id="cell" spatialDimensions="3" constant="true"/>'


def sized(size, cid="cell"):
    return f'<compartment id="{cid}" size="{size}" spatialDimensions="3" constant="true"/>'


def rates(net):
    return {str(r): r.rate for r in net.reactions()}


# -- compartments (section 4.5: size is optional) -----------------------------------------------


def test_sizeless_compartment_with_every_law_in_amounts():
    # derived: with hasOnlySubstanceUnits the law is the propensity itself; with no size the
    # volume is 1, so k * X * Y is rate constant k and 2 X with k * X * (X - 1) is k
    text = model(SIZELESS, species("X", amount=30) + species("Y", amount=4),
                 {"kb": 0.02, "kd": 0.5},
                 reaction("bind", {"X": 1, "Y": 1}, {"Y": 2}, "kb * X * Y")
                 + reaction("pair", {"X": 2}, {"Y": 1}, "kb * X * (X - 1)")
                 + reaction("decay", {"Y": 1}, {}, "kd * Y"))
    net = network_from_sbml(text)
    assert net.volume == 1.0
    assert rates(net) == {"X + Y -> 2 Y": 0.02, "2 X -> Y": 0.02, "Y -> 0": 0.5}
    assert list(net.initial) == [30, 4]


@pytest.mark.parametrize("species_xml, formula, what", [
    (species("X", concentration=2.0), "kd * X", "initial concentration of species X"),
    (species("X", amount=3, only_amounts=False), "kd * X", "species X is a concentration"),
    (species("X", amount=3), "cell * kd * X", "a kinetic law uses it"),
])
def test_a_missing_size_that_matters_is_an_error_naming_the_compartment(species_xml, formula,
                                                                         what):
    text = model(SIZELESS, species_xml, {"kd": 0.5}, reaction("decay", {"X": 1}, {}, formula))
    with pytest.raises(ModelError, match=f"compartment cell has no size, and .*{what}") as info:
        network_from_sbml(text, source="lab.xml")
    assert "\n" not in str(info.value)


def test_compartments_of_equal_size_share_the_volume():
    # two droplets of the same size: concentrations in each, laws multiplied by their size
    comps = sized(2.5, "left") + sized(2.5, "right")
    text = model(comps, species("A", "left", concentration=4.0, only_amounts=False)
                 + species("B", "right", amount=6, only_amounts=False),
                 {"k": 0.3},
                 reaction("join", {"A": 1, "B": 1}, {"A": 2}, "left * k * A * B"))
    net = network_from_sbml(text)
    assert net.volume == 2.5
    assert list(net.initial) == [10, 6]  # 4 per unit volume x 2.5
    assert net.rates[0] == pytest.approx(0.3, rel=1e-15)  # deterministic k [A][B] V


def test_compartments_of_different_sizes_are_refused_by_name():
    text = model(sized(1.0, "left") + sized(2.0, "right"),
                 species("A", "left", amount=1) + species("B", "right", amount=1), {"k": 1},
                 reaction("r", {"A": 1}, {"B": 1}, "k * A"))
    with pytest.raises(ModelError, match=r"compartments left \(size 1\) and right \(size 2\)"):
        network_from_sbml(text)


# -- species held fixed (section 4.6: boundaryCondition and constant) ---------------------------


def test_boundary_species_as_reactant_and_product_stay_fixed():
    # a feed strand F (boundary) makes X; X is exported into a sink W (boundary)
    text = model(sized(1.0), species("F", amount=5, boundary=True) + species("X", amount=0)
                 + species("W", amount=0, boundary=True), {"kf": 0.4, "kw": 0.1},
                 reaction("feed", {"F": 1}, {"X": 1}, "kf * F")
                 + reaction("sink", {"X": 1}, {"W": 1}, "kw * X"))
    net = network_from_sbml(text)
    assert rates(net) == {"F -> F + X": 0.4, "X -> 0": 0.1}
    # derived: the feed's propensity is kf * 5 whatever else happens; W never changes
    for x in ([5, 0, 0], [5, 7, 0]):
        np.testing.assert_allclose(propensities(net, x), [0.4 * 5, 0.1 * x[1]])
    assert (net.stoichiometry.toarray()[[0, 2]] == 0).all()


def test_constant_species_as_a_reactant_is_given_back():
    # constant="true" without boundaryCondition: held fixed all the same (section 4.6)
    text = model(sized(1.0), species("E", amount=2, constant=True) + species("X", amount=9)
                 + species("Y", amount=0), {"k": 0.5},
                 reaction("use", {"E": 1, "X": 1}, {"Y": 1}, "k * E * X"))
    net = network_from_sbml(text)
    assert rates(net) == {"E + X -> E + Y": 0.5}
    assert net.stoichiometry.toarray()[0].tolist() == [0]


def test_constant_species_in_a_law_is_read_as_its_value():
    # an enzyme E held constant (not a reactant) catalyses X -> P: law k * E * X is
    # first order in X with constant k * E (derived)
    text = model(sized(1.0), species("E", amount=3, constant=True) + species("X", amount=9)
                 + species("P", amount=0), {"k": 0.25},
                 reaction("convert", {"X": 1}, {"P": 1}, "k * E * X",
                          modifiers='<modifierSpeciesReference species="E"/>'))
    net = network_from_sbml(text)
    assert rates(net) == {"X -> P": 0.75}
    assert "E" in net.species and net.initial[net.species.index("E")] == 3


# -- parameters (section 4.7 and 4.11.5 local parameters) ---------------------------------------


def test_local_parameter_shadows_the_global_one():
    local = '<listOfLocalParameters><localParameter id="k" value="0.9"/></listOfLocalParameters>'
    text = model(sized(1.0), species("X", amount=4), {"k": 0.1},
                 reaction("decay", {"X": 1}, {}, "k * X", extra=local)
                 + reaction("decay2", {"X": 1}, {}, "k * X / 2"))
    net = network_from_sbml(text)
    np.testing.assert_allclose(net.rates, [0.9, 0.05])


def test_parameters_listed_after_the_reactions_that_use_them():
    text = document(f"<listOfCompartments>{sized(1.0)}</listOfCompartments>"
                    f"<listOfSpecies>{species('X', amount=4)}</listOfSpecies>"
                    f"<listOfReactions>{reaction('decay', {'X': 1}, {}, 'kd * X')}"
                    "</listOfReactions>"
                    '<listOfParameters><parameter id="kd" value="0.3" constant="true"/>'
                    "</listOfParameters>")
    assert network_from_sbml(text).rates[0] == 0.3


def assignments(*pairs):
    return "<listOfInitialAssignments>" + "".join(
        f'<initialAssignment symbol="{symbol}">{law(formula)}</initialAssignment>'
        for symbol, formula in pairs) + "</listOfInitialAssignments>"


def test_parameters_and_counts_set_by_initial_assignments():
    # section 4.8: kd is computed from a half-life given after it, and the initial count of X
    # from a concentration (hasOnlySubstanceUnits false: the assignment is a concentration)
    text = model(sized(2.0), species("X", only_amounts=False), {},
                 reaction("decay", {"X": 1}, {}, "cell * kd * X"),
                 extra=assignments(("kd", "ln2 / half"), ("X", "3 * dose"))).replace(
        "<listOfReactions>", '<listOfParameters><parameter id="kd" constant="true"/>'
        '<parameter id="half" value="4" constant="true"/>'
        '<parameter id="ln2" value="0.6931471805599453" constant="true"/>'
        '<parameter id="dose" value="5" constant="true"/></listOfParameters>'
        "<listOfReactions>")
    net = network_from_sbml(text)
    assert net.rates[0] == pytest.approx(0.6931471805599453 / 4, rel=1e-15)
    assert list(net.initial) == [30]  # 3 * 5 per unit volume, times size 2


def test_initial_assignment_that_needs_the_state_is_refused_by_name():
    text = model(sized(1.0), species("X", amount=2) + species("Y", amount=1), {"k": 1},
                 reaction("decay", {"X": 1}, {}, "k * X"),
                 extra=assignments(("k", "2 * Y")))
    with pytest.raises(ModelError, match="initial assignment to k: '2 \\* Y' is not a number"):
        network_from_sbml(text)


def test_level_2_kinetic_law_parameters():
    body = (f"<listOfCompartments>{sized(1.0)}</listOfCompartments>"
            '<listOfSpecies><species id="X" compartment="cell" initialAmount="4" '
            'hasOnlySubstanceUnits="true"/></listOfSpecies>'
            '<listOfReactions><reaction id="decay" reversible="false">'
            '<listOfReactants><speciesReference species="X"/></listOfReactants>'
            f'<kineticLaw>{law("kd * X")}<listOfParameters><parameter id="kd" value="0.7"/>'
            "</listOfParameters></kineticLaw></reaction></listOfReactions>")
    net = network_from_sbml(document(body, 2, 4))
    assert rates(net) == {"X -> 0": 0.7}  # stoichiometry defaults to 1 in Level 2


# -- stoichiometry attributes in every level (4.11.3) ------------------------------------------


@pytest.mark.parametrize("level, version", [(2, 1), (2, 4), (3, 1), (3, 2)])
def test_stoichiometry_attribute_in_every_level(level, version):
    constant = ' constant="true"' if level == 3 else ""
    extra = ' constant="true"' if level == 3 else ""
    spec = "".join(f'<species id="{s}" compartment="cell" initialAmount="{a}" '
                   f'hasOnlySubstanceUnits="true" boundaryCondition="false"{extra}/>'
                   .replace(' constant="true"/>', ' constant="false"/>')
                   for s, a in (("P", 40), ("D", 0)))
    body = (f'<listOfCompartments><compartment id="cell" size="2"{constant}/>'
            f"</listOfCompartments><listOfSpecies>{spec}</listOfSpecies>"
            '<listOfReactions><reaction id="dimerise" reversible="false">'
            f'<listOfReactants><speciesReference species="P" stoichiometry="2"{constant}/>'
            f'</listOfReactants><listOfProducts><speciesReference species="D" '
            f'stoichiometry="1"{constant}/></listOfProducts>'
            f'<kineticLaw>{law("kf * P * (P - 1) / cell")}<listOfParameters>'
            '<parameter id="kf" value="0.01"/></listOfParameters></kineticLaw>'
            "</reaction></listOfReactions>")
    if level == 3:
        body = body.replace("<listOfParameters>", "<listOfLocalParameters>").replace(
            "</listOfParameters>", "</listOfLocalParameters>").replace(
            "<parameter ", "<localParameter ")
    if (level, version) == (3, 1):
        body = body.replace('reversible="false"', 'reversible="false" fast="false"')
    net = network_from_sbml(document(body, level, version))
    assert rates(net) == {"2 P -> D": 0.01}
    assert net.volume == 2.0


def test_level_3_stoichiometry_left_out_is_refused_by_name():
    text = model(sized(1.0), species("X", amount=1), {"k": 1},
                 reaction("decay", {"X": 1}, {}, "k * X")).replace(' stoichiometry="1"', "")
    with pytest.raises(ModelError, match="reaction decay: the stoichiometry of X is not given"):
        network_from_sbml(text)


# -- laws in equivalent forms (4.11.5), read under docs/design.md's propensity convention ---------


@pytest.mark.parametrize("reactants, formula, only_amounts, rate", [
    # derived, volume V = 4: in amounts the law is the propensity c x (x - 1) ... and our
    # constant is c V^(order - 1). k X (X - 1) / 2 is (k / 2) x (x - 1): our 2 X counts
    # x (x - 1) with no 1/2, so the constant is (1 / 2) * 4
    ({"X": 2}, "k * X * (X - 1) / 2", True, 0.5 * 4.0),
    ({"X": 1}, "k * X / 2 / 0.5", True, 1.0),
    ({"X": 1}, "cell * k * X", False, 1.0),  # concentration x / V times V: k x
    ({"X": 2}, "cell * k * X^2", False, 1.0),  # deterministic k [X]^2 V = (k / V) x^2
    ({"X": 1, "Y": 1}, "(k * Y) * (X * cell) / cell", True, 4.0),  # k x y = (k V) x y / V
])
def test_equivalent_mass_action_forms(reactants, formula, only_amounts, rate):
    spec = species("X", amount=8, only_amounts=only_amounts) + species("Y", amount=2,
                                                                        only_amounts=only_amounts)
    text = model(sized(4.0), spec, {"k": 1.0},
                 reaction("r", reactants, {"Y": 3}, formula))
    net = network_from_sbml(text)
    assert net.rates[0] == pytest.approx(rate, rel=1e-15)


# -- refusals: one line naming the element ------------------------------------------------------


@pytest.mark.parametrize("extra, match", [
    ('<listOfEvents><event id="flush" useValuesFromTriggerTime="true"><trigger '
     f'initialValue="true" persistent="true"><math xmlns="{MATHML}"><apply><gt/><csymbol '
     'encoding="text" definitionURL="http://www.sbml.org/sbml/symbols/time">t</csymbol>'
     '<cn>1</cn></apply></math></trigger></event></listOfEvents>', "event flush: events"),
    (f'<listOfRules><assignmentRule variable="k"><math xmlns="{MATHML}"><cn>2</cn></math>'
     "</assignmentRule></listOfRules>", "assignment rule for k: rules"),
    (f'<listOfRules><rateRule variable="X"><math xmlns="{MATHML}"><cn>2</cn></math>'
     "</rateRule></listOfRules>", "rate rule for X: rules"),
])
def test_events_and_rules_are_refused_by_name(extra, match):
    text = model(sized(1.0), species("X", amount=1) + species("Y", amount=1),
                 {"k": 1}, reaction("decay", {"X": 1}, {}, "k * X"), extra=extra)
    text = text.replace('id="k" value="1" constant="true"', 'id="k" value="1" constant="false"')
    with pytest.raises(ModelError, match=match) as info:
        network_from_sbml(text)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("formula, match", [
    ("k * X / (2 + X)", "not mass action"),
    ("k * X * Y", "depends on Y, which is not a reactant nor held fixed"),
    ("k * X * time", "time"),
    ("k * exp(X)", "operator"),
])
def test_laws_beyond_mass_action_are_refused_naming_the_reaction(formula, match):
    text = model(sized(1.0), species("X", amount=1) + species("Y", amount=1), {"k": 1},
                 reaction("grow", {"X": 1}, {"X": 2}, formula))
    with pytest.raises(ModelError, match=f"reaction grow: .*{match}") as info:
        network_from_sbml(text, source="lab.xml")
    assert "\n" not in str(info.value) and str(info.value).startswith("lab.xml")


def test_reversible_law_is_refused_with_a_hint():
    text = model(sized(1.0), species("X", amount=1) + species("Y", amount=1),
                 {"kf": 1, "kr": 2}, reaction("swap", {"X": 1}, {"Y": 1}, "kf * X - kr * Y")
                 ).replace('reversible="false"', 'reversible="true"')
    with pytest.raises(ModelError, match="reaction swap: .* as two irreversible ones"):
        network_from_sbml(text)


# -- the export read by an independent reader ---------------------------------------------------


def test_export_validates_and_libsbml_evaluates_the_same_propensities():
    """libsbml's own evaluator (SBMLTransforms.evaluateASTNode) reads every kinetic law of the
    export at a few states; it must give this project's propensities (docs/design.md convention)."""
    import libsbml

    net = Network.from_reactions("mix", ["A", "B", "C"], [
        Reaction({"A": 1, "B": 1}, {"C": 2}, 0.37), Reaction({"A": 2}, {"B": 1}, 1.9),
        Reaction({"C": 1}, {}, 0.05), Reaction({}, {"A": 1}, 3.25),
        Reaction({"A": 2, "B": 1}, {"C": 1}, 0.8), Reaction({"A": 3}, {"C": 1}, 0.1)],
        volume=13.5, initial={"A": 5, "B": 7})
    text = network_to_sbml(net)
    assert sbml_consistency(text)[0] == []
    doc = libsbml.readSBMLFromString(text)
    sbml_model = doc.getModel()
    for state in ([5, 7, 0], [10, 3, 4], [0, 0, 9], [2, 1, 1], [31, 17, 5]):
        for name, count in zip("ABC", state, strict=True):
            sbml_model.getSpecies(name).setInitialAmount(float(count))
        libsbml.SBMLTransforms.clearComponentValues(sbml_model)
        theirs = [libsbml.SBMLTransforms.evaluateASTNode(
            sbml_model.getReaction(j).getKineticLaw().getMath(), sbml_model)
            for j in range(sbml_model.getNumReactions())]
        np.testing.assert_allclose(theirs, propensities(net, np.array(state)), rtol=1e-13,
                                   atol=1e-300)



def test_gillespy2_reads_the_export_to_the_same_propensities(tmp_path):
    """A second, independent reader: GillesPy2's own SBML importer (gillespy2.import_SBML)
    turns each kinetic law into a propensity expression; evaluated with its parameter values at
    a few states it must give this project's propensities."""
    import gillespy2

    net = Network.from_reactions("mix", ["A", "B", "C"], [
        Reaction({"A": 1, "B": 1}, {"C": 2}, 0.37), Reaction({"A": 2}, {"B": 1}, 1.9),
        Reaction({"C": 1}, {}, 0.05), Reaction({}, {"A": 1}, 3.25),
        Reaction({"A": 2, "B": 1}, {"C": 1}, 0.8), Reaction({"A": 3}, {"C": 1}, 0.1)],
        volume=13.5, initial={"A": 5, "B": 7})
    path = tmp_path / "mix.xml"
    path.write_text(network_to_sbml(net))
    model, errors = gillespy2.import_SBML(str(path))
    assert model is not None, errors
    values = {name: float(p.expression) for name, p in model.listOfParameters.items()}
    laws = [r.propensity_function for r in model.listOfReactions.values()]
    assert len(laws) == net.n_reactions
    for state in ([5, 7, 0], [10, 3, 4], [0, 0, 9], [31, 17, 5]):
        env = {**values, **dict(zip("ABC", state, strict=True))}
        theirs = [eval(law, {"__builtins__": {}}, env) for law in laws]  # noqa: S307
        np.testing.assert_allclose(theirs, propensities(net, np.array(state)), rtol=1e-13)
