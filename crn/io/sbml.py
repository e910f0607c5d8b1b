"""SBML Level 3 Version 2 export and mass-action import, through python-libsbml.

Export writes one compartment whose size is the network's volume, species
with initial amounts (``hasOnlySubstanceUnits="true"``, so a species symbol in
a law is a molecule count), one global constant parameter per rate constant,
and kinetic laws equal to this project's stochastic propensity
``k * prod_s x_s (x_s - 1) ... (x_s - r_s + 1) / V^(order - 1)``. Output
labels, the majority question, the protocol flag and the exact values of
numbers (libsbml writes 15 significant digits) travel in annotations, so an
export read back gives the identical network.

Import accepts mass-action models: every kinetic law must equal
``k * prod_s x_s (x_s - 1) ... / V^(order - 1)`` (the form written here) or
the plain ``k * prod_s x_s^r_s / V^(order - 1)``, both read as rate constant
k, with species in amounts or concentrations. Any other law is refused with
the reaction's id.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from xml.sax.saxutils import quoteattr

from ..errors import ModelError
from ..network import Network, Reaction

__all__ = ["network_to_sbml", "network_from_sbml", "sbml_consistency", "NAMESPACE"]

#: XML namespace of this project's SBML annotations.
NAMESPACE = "urn:x-crn:sbml-annotation:1"
_PREFIX = "crn"
_SID = re.compile(r"[^A-Za-z0-9_]")


def _libsbml():
    import libsbml

    return libsbml


def _check(code, what):
    libsbml = _libsbml()
    if code != libsbml.LIBSBML_OPERATION_SUCCESS:
        raise ModelError(f"libsbml refused {what}: {libsbml.OperationReturnValue_toString(code)}")


def _unique(base: str, taken: set[str]) -> str:
    name = base
    while name in taken:
        name += "_"
    taken.add(name)
    return name


def _model_id(name: str) -> str:
    text = _SID.sub("_", name.strip()) or "model"
    return text if not text[0].isdigit() else "m_" + text


def _annotation(tag: str, attributes: dict[str, str], text: str | None = None) -> str:
    attrs = "".join(f" {k}={quoteattr(v)}" for k, v in attributes.items())
    body = "" if text is None else f"<{_PREFIX}:about>{_escape(text)}</{_PREFIX}:about>"
    return (f"<annotation><{_PREFIX}:{tag} xmlns:{_PREFIX}=\"{NAMESPACE}\"{attrs}>{body}"
            f"</{_PREFIX}:{tag}></annotation>")


def _escape(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _law(rate_id: str, reactants: dict[str, int], compartment: str) -> str:
    factors = [rate_id]
    for s, m in reactants.items():
        factors.append(s)
        factors.extend(f"({s} - {j} item)" for j in range(1, m))
    order = sum(reactants.values())
    formula = " * ".join(factors)
    if order == 0:
        return f"{formula} * {compartment}"
    if order == 2:
        return f"{formula} / {compartment}"
    if order > 2:
        return f"{formula} / {compartment}^({order - 1} dimensionless)"
    return formula


def _rate_unit(model, order: int, known: dict[int, str], taken: set[str]) -> str:
    """Unit of a rate constant of the given order: item^(1 - order), time and volume being
    dimensionless (the propensity is in items per unit time)."""
    if order == 1:
        return "dimensionless"
    if order not in known:
        unit_def = model.createUnitDefinition()
        known[order] = _unique(f"rate_order_{order}", taken)
        _check(unit_def.setId(known[order]), "a unit definition")
        unit = unit_def.createUnit()
        unit.setKind(_libsbml().UNIT_KIND_ITEM)
        unit.setExponent(1 - order)
        unit.setScale(0)
        unit.setMultiplier(1.0)
    return known[order]


def _law_ast(rate_id: str, reactants: dict[str, int], compartment: str, prefix: str):
    """The kinetic law as a libsbml AST. The formula is parsed with placeholder names that
    are then renamed, so that ids the formula parser reads as constants (``pi``, ``time``,
    ``avogadro``, ``true``, ...) stay plain names."""
    names = {rate_id: f"{prefix}k", compartment: f"{prefix}v"}
    names.update({s: f"{prefix}{j}" for j, s in enumerate(reactants)})
    formula = _law(names[rate_id], {names[s]: m for s, m in reactants.items()},
                   names[compartment])
    math_ast = _libsbml().parseL3Formula(formula)
    if math_ast is not None:
        for real, placeholder in names.items():
            math_ast.renameSIdRefs(placeholder, real)
    return math_ast


def network_to_sbml(net: Network) -> str:
    """Write a network as an SBML Level 3 Version 2 document.

    Parameters
    ----------
    net : Network

    Returns
    -------
    str
        The XML document. It passes libsbml's consistency check with no
        error (see :func:`sbml_consistency`).

    Raises
    ------
    ModelError
        If libsbml refuses an element (it should not for a valid network).

    References
    ----------
    Hucka et al., "The Systems Biology Markup Language (SBML): Language
    Specification for Level 3 Version 2 Core", J. Integr. Bioinform. 2019.
    Condon, Hajiaghayi, Kirkpatrick, Manuch, Natural Computing 2020 (the
    propensity convention the kinetic laws encode).
    """
    libsbml = _libsbml()
    doc = libsbml.SBMLDocument(3, 2)
    model = doc.createModel()
    taken = set(net.species)
    _check(model.setId(_unique(_model_id(net.name), taken)), "the model id")
    _check(model.setName(net.name), "the model name")
    for attr in ("setSubstanceUnits", "setExtentUnits"):
        _check(getattr(model, attr)("item"), "the model units")
    _check(model.setTimeUnits("dimensionless"), "the time units")
    attributes = {"volume": repr(float(net.volume)), "fromProtocol": str(net.from_protocol).lower()}
    if net.majority is not None:
        attributes["majority"] = " ".join(net.majority)
    _check(model.setAnnotation(_annotation("model", attributes, net.about)), "the annotation")
    if net.about:
        notes = f'<body xmlns="http://www.w3.org/1999/xhtml"><p>{_escape(net.about)}</p></body>'
        _check(model.setNotes(notes), "the notes")

    compartment_id = _unique("volume", taken)
    comp = model.createCompartment()
    _check(comp.setId(compartment_id), "the compartment")
    comp.setSize(float(net.volume))
    comp.setConstant(True)
    comp.setSpatialDimensions(3)
    comp.setUnits("dimensionless")

    for name, count in zip(net.species, net.initial, strict=True):
        sp = model.createSpecies()
        _check(sp.setId(name), f"species {name!r}")
        sp.setCompartment(compartment_id)
        sp.setInitialAmount(float(count))
        sp.setHasOnlySubstanceUnits(True)
        sp.setBoundaryCondition(False)
        sp.setConstant(False)
        sp.setSubstanceUnits("item")
        attrs = {"initial": str(int(count))}
        label = net.label_of(name)
        if label is not None:
            attrs["label"] = label
        _check(sp.setAnnotation(_annotation("species", attrs)), f"species {name!r}")

    rate_units: dict[int, str] = {}
    prefix = "q_"
    while any(name.startswith(prefix) for name in taken):
        prefix = "q" + prefix
    for i, reaction in enumerate(net.reactions(), start=1):
        rate_id = _unique(f"k{i}", taken)
        param = model.createParameter()
        _check(param.setId(rate_id), f"parameter {rate_id}")
        param.setValue(reaction.rate)
        param.setConstant(True)
        _check(param.setUnits(_rate_unit(model, reaction.order, rate_units, taken)),
               f"the units of {rate_id}")
        rx = model.createReaction()
        _check(rx.setId(_unique(f"R{i}", taken)), f"reaction {i}")
        rx.setReversible(False)
        _check(rx.setAnnotation(_annotation("reaction", {"rate": repr(reaction.rate)})),
               f"reaction {i}")
        for side, create in ((reaction.reactants, rx.createReactant),
                             (reaction.products, rx.createProduct)):
            for s, m in side.items():
                ref = create()
                ref.setSpecies(s)
                ref.setStoichiometry(float(m))
                ref.setConstant(True)
        law = rx.createKineticLaw()
        math_ast = _law_ast(rate_id, dict(reaction.reactants), compartment_id, prefix)
        if math_ast is None:
            raise ModelError(f"cannot write the kinetic law of reaction {i}")
        _check(law.setMath(math_ast), f"the kinetic law of reaction {i}")
    return libsbml.writeSBMLToString(doc)


def sbml_consistency(text: str) -> tuple[list[str], list[str]]:
    """Run libsbml's consistency checks on an SBML document.

    Parameters
    ----------
    text : str
        The XML document.

    Returns
    -------
    errors : list of str
        Messages of severity error or fatal (reading and consistency).
    warnings : list of str
        Messages of lower severity.
    """
    libsbml = _libsbml()
    doc = libsbml.readSBMLFromString(text)
    doc.checkConsistency()
    errors, warnings = [], []
    log = doc.getErrorLog()
    for k in range(log.getNumErrors()):
        item = log.getError(k)
        message = f"{item.getCategoryAsString()} {item.getErrorId()} line {item.getLine()}: " \
                  f"{' '.join(item.getMessage().split())}"
        if item.getSeverity() >= libsbml.LIBSBML_SEV_ERROR:
            errors.append(message)
        else:
            warnings.append(message)
    return errors, warnings


# -- import ----------------------------------------------------------------------------------


def _crn_attributes(element) -> tuple[dict[str, str], str | None]:
    """Attributes (and about text) of this project's annotation on an SBML element, if any."""
    if not element.isSetAnnotation():
        return {}, None
    try:
        root = ET.fromstring(element.getAnnotationString())
    except ET.ParseError:
        return {}, None
    for child in root:
        if child.tag.startswith("{" + NAMESPACE + "}"):
            about = child.find(f"{{{NAMESPACE}}}about")
            return dict(child.attrib), None if about is None else (about.text or "")
    return {}, None


def _exact(value: float, annotated: str | None) -> float:
    """The annotated exact value when it agrees with the written (15-digit) one."""
    if annotated is None:
        return value
    try:
        exact = float(annotated)
    except ValueError:
        return value
    return exact if math.isclose(exact, value, rel_tol=1e-13, abs_tol=0.0) else value


class _NotMassAction(Exception):
    pass


def _to_sympy(node, symbols):
    """Convert a libsbml AST into a sympy expression over the given symbols (numbers exact)."""
    import sympy

    libsbml = _libsbml()
    kind = node.getType()
    children = [node.getChild(i) for i in range(node.getNumChildren())]
    if kind == libsbml.AST_INTEGER:
        return sympy.Integer(node.getInteger())
    if kind in (libsbml.AST_REAL, libsbml.AST_REAL_E):
        value = node.getReal()
        if not math.isfinite(value):
            raise _NotMassAction("a non-finite number")
        return _q(value)
    if kind == libsbml.AST_RATIONAL:
        return sympy.Rational(node.getNumerator(), node.getDenominator())
    if kind == libsbml.AST_NAME:
        name = node.getName()
        if name not in symbols:
            raise _NotMassAction(f"the symbol {name!r}")
        return symbols[name]
    args = [_to_sympy(child, symbols) for child in children]
    binary = (libsbml.AST_DIVIDE, libsbml.AST_POWER, libsbml.AST_FUNCTION_POWER)
    if (kind in binary and len(args) != 2) or (kind == libsbml.AST_MINUS
                                               and len(args) not in (1, 2)):
        raise _NotMassAction("an operator with missing or extra operands")
    if kind == libsbml.AST_PLUS:
        return sympy.Add(*args)
    if kind == libsbml.AST_TIMES:
        return sympy.Mul(*args)
    if kind == libsbml.AST_MINUS:
        return -args[0] if len(args) == 1 else args[0] - args[1]
    if kind == libsbml.AST_DIVIDE:
        return args[0] / args[1]
    if kind in (libsbml.AST_POWER, libsbml.AST_FUNCTION_POWER):
        if not args[1].is_Integer:
            raise _NotMassAction("a power that is not a whole number")
        if abs(args[1]) > _MAX_STOICHIOMETRY:
            raise _NotMassAction(f"a power above {_MAX_STOICHIOMETRY}")
        return args[0] ** args[1]
    raise _NotMassAction(f"the operator {libsbml.formulaToL3String(node)!r}")


_MAX_STOICHIOMETRY = 1000
"""Larger stoichiometries are refused: mass-action laws of that order are not chemistry, and
expanding them symbolically would not finish."""


def _q(x):
    """A float as the exact sympy rational it stands for."""
    import sympy

    if not math.isfinite(float(x)):
        return sympy.nan  # makes the law's rate constant non-real: refused as not mass action
    return sympy.Rational(*float(x).as_integer_ratio())


def _falling(x, m):
    out = 1
    for j in range(m):
        out *= x - j
    return out


def _rate_constant(law, reactants, symbols, volume):
    """Rate constant k of a mass-action law in amounts, or raise _NotMassAction."""
    import sympy

    expr = _to_sympy(law, symbols)
    order = sum(reactants.values())
    scale = _q(volume) ** (order - 1)
    for form in (_falling, lambda x, m: x**m):
        product = sympy.Integer(1)
        for s, m in reactants.items():
            product *= form(sympy.Symbol(s), m)
        ratio = sympy.cancel(expr / product)
        if not ratio.free_symbols:
            k = ratio * scale
            if not k.is_real or k < 0:
                raise _NotMassAction(f"a negative rate constant {float(k):g}")
            return float(k)
    raise _NotMassAction("a law that is not k * prod falling factorials / V^(order - 1)")


def network_from_sbml(text: str, *, source: str = "<sbml>") -> Network:
    """Read a mass-action network from an SBML document.

    Parameters
    ----------
    text : str
        The XML document (any SBML level and version libsbml reads).
    source : str
        Name used in error messages.

    Returns
    -------
    Network
        With the single compartment's size as volume. Annotations written by
        :func:`network_to_sbml` restore labels, the question, the protocol
        flag and exact numbers.

    Raises
    ------
    ModelError
        When the document has errors, more than one compartment, rules,
        events, function definitions, boundary species, non-integer
        amounts or stoichiometries, or a kinetic law that is not mass action
        (the message names the reaction id).
    """
    libsbml = _libsbml()
    doc = libsbml.readSBMLFromString(text)
    if doc.getNumErrors(libsbml.LIBSBML_SEV_ERROR) + doc.getNumErrors(libsbml.LIBSBML_SEV_FATAL):
        log = doc.getErrorLog()
        for k in range(log.getNumErrors()):
            item = log.getError(k)
            if item.getSeverity() >= libsbml.LIBSBML_SEV_ERROR:
                raise ModelError(f"invalid SBML: {' '.join(item.getMessage().split())}",
                                 file=source, line=item.getLine() or None)
    model = doc.getModel()
    if model is None:
        raise ModelError("the SBML document has no model", file=source)

    def refuse(message, field=None):
        return ModelError(message, file=source, field=field)

    for what, count in (("rules", model.getNumRules()), ("events", model.getNumEvents()),
                        ("initial assignments", model.getNumInitialAssignments()),
                        ("function definitions", model.getNumFunctionDefinitions()),
                        ("constraints", model.getNumConstraints())):
        if count:
            raise refuse(f"the model has {what}; only plain mass-action networks are imported")
    if model.getNumCompartments() != 1:
        raise refuse(f"the model has {model.getNumCompartments()} compartments; exactly one "
                     "is supported", "compartments")
    comp = model.getCompartment(0)
    if not comp.isSetSize() or not math.isfinite(comp.getSize()) or comp.getSize() <= 0:
        raise refuse(f"compartment {comp.getId()} needs a positive size", comp.getId())
    model_attrs, about = _crn_attributes(model)
    volume = _exact(comp.getSize(), model_attrs.get("volume"))

    import sympy

    symbols: dict[str, object] = {comp.getId(): _q(volume)}
    species, initial, output = [], {}, {}
    for k in range(model.getNumSpecies()):
        sp = model.getSpecies(k)
        sid = sp.getId()
        if sp.getBoundaryCondition():
            raise refuse(f"species {sid} is a boundary species; not supported", sid)
        attrs, _ = _crn_attributes(sp)
        if sp.isSetInitialAmount():
            amount = sp.getInitialAmount()
        elif sp.isSetInitialConcentration():
            amount = sp.getInitialConcentration() * volume
        else:
            amount = 0.0
        amount = _exact(amount, attrs.get("initial"))
        if not math.isfinite(amount) or amount < 0 or abs(amount - round(amount)) > 1e-9 * max(
                1.0, abs(amount)):
            raise refuse(f"initial amount of {sid} is {amount!r}, not a whole number >= 0", sid)
        rounded = round(amount)
        species.append(sid)
        initial[sid] = int(rounded)
        if "label" in attrs:
            output[sid] = attrs["label"]
        x = sympy.Symbol(sid)
        symbols[sid] = x if sp.getHasOnlySubstanceUnits() else x / symbols[comp.getId()]
    for k in range(model.getNumParameters()):
        p = model.getParameter(k)
        if not p.getConstant() or not p.isSetValue():
            raise refuse(f"parameter {p.getId()} must be constant with a value", p.getId())
        symbols[p.getId()] = _q(p.getValue())

    reactions = []
    for k in range(model.getNumReactions()):
        rx = model.getReaction(k)
        rid = rx.getId()
        sides = []
        for count, get in ((rx.getNumReactants(), rx.getReactant),
                           (rx.getNumProducts(), rx.getProduct)):
            side: dict[str, int] = {}
            for j in range(count):
                ref = get(j)
                m = ref.getStoichiometry() if ref.isSetStoichiometry() else 1.0
                if not float(m).is_integer() or m < 0:
                    raise refuse(f"reaction {rid}: stoichiometry {m} of {ref.getSpecies()} is "
                                 "not a whole number", rid)
                if m > _MAX_STOICHIOMETRY:
                    raise refuse(f"reaction {rid}: stoichiometry {m:g} of {ref.getSpecies()} "
                                 f"is above {_MAX_STOICHIOMETRY}", rid)
                if m:
                    side[ref.getSpecies()] = side.get(ref.getSpecies(), 0) + int(m)
            sides.append(side)
        law = rx.getKineticLaw()
        if law is None or law.getMath() is None:
            raise refuse(f"reaction {rid} has no kinetic law", rid)
        local = dict(symbols)
        for j in range(law.getNumLocalParameters()):
            p = law.getLocalParameter(j)
            local[p.getId()] = _q(p.getValue())
        try:
            rate = _rate_constant(law.getMath(), sides[0], local, volume)
        except (TypeError, ValueError, ZeroDivisionError, OverflowError) as err:
            # a law sympy cannot reduce to a real constant (k / 0, ...): not mass action
            err = _NotMassAction(f"no real rate constant: {type(err).__name__}")
            formula = libsbml.formulaToL3String(law.getMath())
            raise refuse(f"reaction {rid}: kinetic law {formula!r} is not mass action "
                         f"({err}); only mass-action laws are imported", rid) from None
        except _NotMassAction as err:
            formula = libsbml.formulaToL3String(law.getMath())
            raise refuse(f"reaction {rid}: kinetic law {formula!r} is not mass action "
                         f"({err}); only mass-action laws are imported", rid) from None
        rate = _exact(rate, _crn_attributes(rx)[0].get("rate"))
        reactions.append(Reaction(sides[0], sides[1], rate))
    majority = model_attrs.get("majority")
    try:
        return Network.from_reactions(
            model.getName() or model.getId() or "network", species, reactions, volume=volume,
            initial=initial, output=output,
            majority=tuple(majority.split()) if majority else None,
            from_protocol=model_attrs.get("fromProtocol") == "true", about=about or "")
    except ModelError as err:
        raise err.located(file=source) from err
