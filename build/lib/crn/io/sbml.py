"""SBML Level 3 Version 2 export and mass-action import, through python-libsbml.

Export writes one compartment whose size is the network's volume, species
with initial amounts (``hasOnlySubstanceUnits="true"``, so a species symbol in
a law is a molecule count), one global constant parameter per rate constant,
and kinetic laws equal to this project's stochastic propensity
``k * prod_s x_s (x_s - 1) ... (x_s - r_s + 1) / V^(order - 1)`` (the whole
numbers in it are constant parameters of j items and the power is repeated
division, so no number in a law carries a unit annotation). Output
labels, the majority question, the protocol flag and the exact values of
numbers (libsbml writes 15 significant digits) travel in annotations, so an
export read back gives the identical network.

Import accepts mass-action networks as modelling tools write them (SBML
Level 2 Version 1 to Level 3 Version 2): compartments without a size when every
law is in amounts, several compartments of one size, boundary and constant
species held fixed, global and local parameters, initial assignments that are
numbers, stoichiometry attributes of every level. Every kinetic law must equal,
after symbolic simplification, ``c * prod_s x_s (x_s - 1) ...`` (the form
written here) or ``c * prod_s x_s^r_s`` over amounts, read as rate constant
``c * V^(order - 1)``. Anything else (rules, events, other laws) is refused in
one line naming the element.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET

from crn.core.errors import ModelError
from crn.core.network import Network, Reaction

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
    from xml.sax.saxutils import quoteattr  # imports urllib: only when writing SBML

    attrs = "".join(f" {k}={quoteattr(v)}" for k, v in attributes.items())
    body = "" if text is None else f"<{_PREFIX}:about>{_escape(text)}</{_PREFIX}:about>"
    return (f"<annotation><{_PREFIX}:{tag} xmlns:{_PREFIX}=\"{NAMESPACE}\"{attrs}>{body}"
            f"</{_PREFIX}:{tag}></annotation>")


def _escape(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _law(rate_id: str, reactants: dict[str, int], compartment: str,
         counts: dict[int, str]) -> str:
    """The propensity as an infix formula; ``counts[j]`` names a constant of j items.

    Whole numbers in the law are such named constants and the volume power is
    written as repeated division, so no number in the law carries a unit
    annotation (``1 item``), which readers that rewrite laws as text do not parse.
    """
    factors = [rate_id]
    for s, m in reactants.items():
        factors.append(s)
        factors.extend(f"({s} - {counts[j]})" for j in range(1, m))
    order = sum(reactants.values())
    formula = " * ".join(factors)
    if order == 0:
        return f"{formula} * {compartment}"
    return formula + f" / {compartment}" * (order - 1)


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


def _law_ast(rate_id: str, reactants: dict[str, int], compartment: str, prefix: str,
             counts: dict[int, str]):
    """The kinetic law as a libsbml AST. The formula is parsed with placeholder names that
    are then renamed, so that ids the formula parser reads as constants (``pi``, ``time``,
    ``avogadro``, ``true``, ...) stay plain names."""
    names = {rate_id: f"{prefix}k", compartment: f"{prefix}v"}
    names.update({s: f"{prefix}{j}" for j, s in enumerate(reactants)})
    names.update({name: f"{prefix}c{j}" for j, name in counts.items()})
    formula = _law(names[rate_id], {names[s]: m for s, m in reactants.items()},
                   names[compartment], {j: names[name] for j, name in counts.items()})
    math_ast = _libsbml().parseL3Formula(formula)
    if math_ast is not None:
        for real, placeholder in names.items():
            math_ast.renameSIdRefs(placeholder, real)
    return math_ast


def _count_constants(model, reactions, taken: set[str]) -> dict[int, str]:
    """Global constants 1, 2, ... items (as many as the largest multiplicity needs)."""
    top = max((m for r in reactions for m in r.reactants.values()), default=1)
    counts = {}
    for j in range(1, top):
        param = model.createParameter()
        counts[j] = _unique(f"items_{j}", taken)
        _check(param.setId(counts[j]), f"parameter {counts[j]}")
        param.setValue(float(j))
        param.setConstant(True)
        _check(param.setUnits("item"), f"the units of {counts[j]}")
    return counts


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
    reactions = list(net.reactions())
    counts = _count_constants(model, reactions, taken)
    for i, reaction in enumerate(reactions, start=1):
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
        math_ast = _law_ast(rate_id, dict(reaction.reactants), compartment_id, prefix, counts)
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


class _NeedsSize(Exception):
    """A law or value needs the size of a compartment that has none (message names it)."""


class _Missing:
    """Stands for a compartment size that is not given; using it in a law is an error."""

    def __init__(self, message: str):
        self.message = message


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
    if kind == libsbml.AST_NAME_TIME:
        raise _NotMassAction("the time symbol (a time-dependent law)")
    if kind == libsbml.AST_NAME:
        name = node.getName()
        if name not in symbols:
            raise _NotMassAction(f"the symbol {name!r}")
        value = symbols[name]
        if isinstance(value, _Missing):
            raise _NeedsSize(value.message)
        return value
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


def _rate_constant(expr, reactants, volume):
    """Rate constant k of a mass-action law (a sympy expression over amounts), or raise.

    The law must equal ``c * prod_s x_s (x_s - 1) ... (x_s - r_s + 1)`` (the propensity
    convention of docs/design.md: ``2 A`` counts a (a - 1), no 1/2) or ``c * prod_s x_s^r_s`` (the
    deterministic form, read with the same constant) for a number c >= 0, in any
    algebraically equivalent form; then ``k = c * volume^(order - 1)``.
    """
    import sympy

    order = sum(reactants.values())
    scale = _q(volume) ** (order - 1)
    extra = set()
    for form in (_falling, lambda x, m: x**m):
        product = sympy.Integer(1)
        for s, m in reactants.items():
            product *= form(sympy.Symbol(s), m)
        ratio = sympy.cancel(sympy.together(expr / product))
        if not ratio.free_symbols:
            k = ratio * scale
            if not k.is_real or k < 0:
                raise _NotMassAction(f"a negative rate constant {float(k):g}")
            return float(k)
        extra |= {str(x) for x in ratio.free_symbols if str(x) not in reactants}
    if extra:
        raise _NotMassAction(f"it depends on {', '.join(sorted(extra))}, which is not a "
                             "reactant nor held fixed")
    raise _NotMassAction("a law that is not k * prod falling factorials / V^(order - 1)")


def _refuse_beyond_mass_action(model, refuse) -> None:
    """One line naming the first rule, event, constraint, function or assignment."""
    libsbml = _libsbml()
    for k in range(model.getNumRules()):
        rule = model.getRule(k)
        kind = {libsbml.SBML_ASSIGNMENT_RULE: "assignment rule",
                libsbml.SBML_RATE_RULE: "rate rule",
                libsbml.SBML_ALGEBRAIC_RULE: "algebraic rule"}.get(rule.getTypeCode(), "rule")
        what = rule.getVariable() if rule.isSetVariable() else f"number {k + 1}"
        raise refuse(f"{kind} for {what}: rules are not mass action; only plain mass-action "
                     "networks are imported", what)
    for k in range(model.getNumEvents()):
        event = model.getEvent(k)
        what = event.getId() or f"number {k + 1}"
        raise refuse(f"event {what}: events are not mass action; only plain mass-action "
                     "networks are imported", what)
    for what, count, name in (
            ("constraint", model.getNumConstraints(), lambda k: f"number {k + 1}"),
            ("function definition", model.getNumFunctionDefinitions(),
             lambda k: model.getFunctionDefinition(k).getId())):
        if count:
            raise refuse(f"{what} {name(0)}: the model has {count} of them; only plain "
                         "mass-action networks with numbers are imported", name(0))
    if model.isSetConversionFactor():
        raise refuse(f"conversion factor {model.getConversionFactor()} of the model: not "
                     "supported", model.getConversionFactor())


def _initial_values(model, symbols, refuse) -> dict:
    """Parameter values and initial assignments, as exact numbers (symbol -> sympy number).

    Initial assignments may use numbers, parameters, compartment sizes and one
    another (in any order); one whose value needs a species, the time or an
    unknown symbol, or that assigns a compartment, is refused by name.
    """
    known = dict(symbols)
    for k in range(model.getNumParameters()):
        p = model.getParameter(k)
        if p.isSetValue():
            known[p.getId()] = _q(p.getValue())
    pending = {}
    for k in range(model.getNumInitialAssignments()):
        assignment = model.getInitialAssignment(k)
        symbol = assignment.getSymbol()
        if model.getCompartment(symbol) is not None:
            raise refuse(f"initial assignment to compartment {symbol}: compartment sizes must "
                         "be numbers", symbol)
        if assignment.getMath() is None:
            raise refuse(f"initial assignment to {symbol} has no math", symbol)
        pending[symbol] = assignment.getMath()
    species = {model.getSpecies(k).getId() for k in range(model.getNumSpecies())}
    while pending:
        done = {}
        for symbol, node in pending.items():
            try:
                value = _to_sympy(node, {s: v for s, v in known.items() if s not in pending})
            except (_NotMassAction, _NeedsSize):
                continue
            if value.free_symbols or not value.is_real:
                continue
            done[symbol] = value
        if not done:
            symbol = next(iter(pending))
            formula = _libsbml().formulaToL3String(pending[symbol])
            raise refuse(f"initial assignment to {symbol}: {formula!r} is not a number built "
                         "from numbers, parameters and compartment sizes", symbol)
        known.update(done)
        for symbol in done:
            del pending[symbol]
    out = {}
    for k in range(model.getNumParameters()):
        pid = model.getParameter(k).getId()
        if pid not in known:
            raise refuse(f"parameter {pid} has no value", pid)
        out[pid] = known[pid]
    out.update({s: v for s, v in known.items() if s in species})
    return out


def _compartments(model, refuse, annotated_volume):
    """Compartment id -> size (None when not given) and the network volume.

    Every compartment with a size must have the same size (that is the volume);
    with none, the volume is 1 and laws in amounts are read as propensities.
    """
    sizes: dict[str, float | None] = {}
    for k in range(model.getNumCompartments()):
        comp = model.getCompartment(k)
        cid = comp.getId()
        if comp.isSetConstant() and not comp.getConstant():
            raise refuse(f"compartment {cid} is not constant; only fixed volumes are "
                         "supported", cid)
        if comp.isSetSize():
            size = comp.getSize()
            if not math.isfinite(size) or size <= 0:
                raise refuse(f"compartment {cid} has size {size!r}; it must be positive", cid)
            sizes[cid] = size
        else:
            sizes[cid] = None
    given = {cid: size for cid, size in sizes.items() if size is not None}
    if len(set(given.values())) > 1:
        (a, va), (b, vb) = sorted({v: (c, v) for c, v in given.items()}.values())[:2]
        raise refuse(f"compartments {a} (size {va:g}) and {b} (size {vb:g}) differ in size; "
                     "only compartments of one size are supported", b)
    volume = next(iter(given.values()), 1.0)
    return sizes, _exact(volume, annotated_volume) if given else volume


def _stoichiometry(ref, level: int, rid: str, refuse) -> float:
    """A species reference's stoichiometry: the attribute (default 1 before Level 3), or a
    constant stoichiometryMath (Level 2)."""
    import sympy

    sid = ref.getSpecies()
    if level == 2 and ref.isSetStoichiometryMath():
        node = ref.getStoichiometryMath().getMath()
        try:
            value = _to_sympy(node, {}) if node is not None else None
        except (_NotMassAction, _NeedsSize):
            value = None
        if value is None or not isinstance(value, sympy.Number):
            raise refuse(f"reaction {rid}: stoichiometryMath of {sid} is not a number", rid)
        return float(value)
    if ref.isSetStoichiometry():
        return ref.getStoichiometry()
    if level < 3:
        return 1.0
    raise refuse(f"reaction {rid}: the stoichiometry of {sid} is not given", rid)


def network_from_sbml(text: str, *, source: str = "<sbml>") -> Network:
    """Read a mass-action network from an SBML document.

    Parameters
    ----------
    text : str
        The XML document (SBML Level 2 Version 1 to Level 3 Version 2).
    source : str
        Name used in error messages.

    Returns
    -------
    Network
        With the common size of the compartments as volume (1 when no
        compartment has a size and every law is in amounts). Boundary and
        constant species stay in the network at their initial count: as a
        reactant they are given back as a product, as a product they are left
        out, and in a law they are read as their fixed value. Annotations
        written by :func:`network_to_sbml` restore labels, the question, the
        protocol flag and exact numbers.

    Raises
    ------
    ModelError
        One line naming the element: a document with errors, rules, events,
        constraints or function definitions; an initial assignment that is not
        a number built from parameters and compartment sizes; compartments
        of different sizes, or a missing size that a concentration or a law
        needs; a parameter without a value; non-integer amounts or
        stoichiometries; a kinetic law that is not mass action (the message
        names the reaction id).

    Notes
    -----
    A kinetic law is recognised when it equals, after symbolic simplification
    (sympy), ``c * prod_s x_s (x_s - 1) ... (x_s - r_s + 1)`` or
    ``c * prod_s x_s^r_s`` over the reactants' amounts x_s (a species whose
    ``hasOnlySubstanceUnits`` is false stands for ``x_s / size``), so
    ``k * X * (X - 1) / 2``, ``k * X / 2 / 0.5`` and ``cell * k * X`` are all
    read. The rate constant is ``c * volume^(order - 1)`` under this project's
    propensity convention (docs/design.md): ``k * X * (X - 1) / 2`` for ``2 X`` gives
    ``k / 2``.

    References
    ----------
    Hucka et al., SBML Level 3 Version 2 Core, 2019: section 4.5 (compartments),
    4.6 (species: hasOnlySubstanceUnits, boundaryCondition, constant), 4.7
    (parameters), 4.11 (reactions, species references, kinetic laws and local
    parameters).
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
    level = doc.getLevel()

    def refuse(message, field=None):
        return ModelError(message, file=source, field=field)

    _refuse_beyond_mass_action(model, refuse)
    model_attrs, about = _crn_attributes(model)
    sizes, volume = _compartments(model, refuse, model_attrs.get("volume"))

    import sympy

    symbols: dict[str, object] = {
        cid: _q(size) if size is not None
        else _Missing(f"compartment {cid} has no size, and a kinetic law uses it")
        for cid, size in sizes.items()}
    values = _initial_values(model, {c: v for c, v in symbols.items()
                                     if not isinstance(v, _Missing)}, refuse)
    species, initial, output, fixed = [], {}, {}, {}
    for k in range(model.getNumSpecies()):
        sp = model.getSpecies(k)
        sid, cid = sp.getId(), sp.getCompartment()
        attrs, _ = _crn_attributes(sp)
        if sid in values:  # an initial assignment, in the species' own units
            amount = float(values[sid])
            if not sp.getHasOnlySubstanceUnits():
                if sizes.get(cid) is None:
                    raise refuse(f"compartment {cid} has no size, and the initial assignment "
                                 f"to species {sid} (a concentration) needs it", cid)
                amount *= sizes[cid]
        elif sp.isSetInitialAmount():
            amount = sp.getInitialAmount()
        elif sp.isSetInitialConcentration():
            if sizes.get(cid) is None:
                raise refuse(f"compartment {cid} has no size, and the initial concentration "
                             f"of species {sid} needs it", cid)
            amount = sp.getInitialConcentration() * sizes[cid]
        else:
            amount = 0.0
        amount = _exact(amount, attrs.get("initial"))
        rounded = round(amount) if math.isfinite(amount) else -1
        if not math.isfinite(amount) or amount < 0 or abs(amount - rounded) > 1e-9 * max(
                1.0, abs(amount)):
            raise refuse(f"initial amount of {sid} is {amount!r}, not a whole number >= 0", sid)
        species.append(sid)
        initial[sid] = int(rounded)
        if "label" in attrs:
            output[sid] = attrs["label"]
        x = sympy.Symbol(sid)
        if sp.getHasOnlySubstanceUnits():
            symbols[sid] = x
        elif sizes.get(cid) is None:
            symbols[sid] = _Missing(f"compartment {cid} has no size, and species {sid} is a "
                                    "concentration (hasOnlySubstanceUnits false) in a kinetic "
                                    "law")
        else:
            symbols[sid] = x / _q(sizes[cid])
        if sp.getBoundaryCondition() or sp.getConstant():
            fixed[sid] = int(rounded)
    for k in range(model.getNumParameters()):
        pid = model.getParameter(k).getId()
        symbols[pid] = values[pid]

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
                m = _stoichiometry(ref, level, rid, refuse)
                if not math.isfinite(m) or not float(m).is_integer() or m < 0:
                    raise refuse(f"reaction {rid}: stoichiometry {m} of {ref.getSpecies()} is "
                                 "not a whole number", rid)
                if m > _MAX_STOICHIOMETRY:
                    raise refuse(f"reaction {rid}: stoichiometry {m:g} of {ref.getSpecies()} "
                                 f"is above {_MAX_STOICHIOMETRY}", rid)
                if m:
                    side[ref.getSpecies()] = side.get(ref.getSpecies(), 0) + int(m)
            sides.append(side)
        reactants, products = sides
        law = rx.getKineticLaw()
        if law is None or law.getMath() is None:
            raise refuse(f"reaction {rid} has no kinetic law", rid)
        local = dict(symbols)
        for name, value in fixed.items():  # held species outside the reactants: numbers
            if name not in reactants and not isinstance(symbols[name], _Missing):
                local[name] = symbols[name].subs(sympy.Symbol(name), _q(value))
        n_local = law.getNumLocalParameters() if level >= 3 else law.getNumParameters()
        for j in range(n_local):
            p = law.getLocalParameter(j) if level >= 3 else law.getParameter(j)
            if not p.isSetValue():
                raise refuse(f"reaction {rid}: local parameter {p.getId()} has no value", rid)
            local[p.getId()] = _q(p.getValue())
        try:
            rate = _rate_constant(_to_sympy(law.getMath(), local), reactants, volume)
        except _NeedsSize as err:
            raise refuse(f"reaction {rid}: {err}", rid) from None
        except (TypeError, ValueError, ZeroDivisionError, OverflowError) as err:
            # a law sympy cannot reduce to a real constant (k / 0, ...): not mass action
            formula = libsbml.formulaToL3String(law.getMath())
            raise refuse(f"reaction {rid}: kinetic law {formula!r} is not mass action "
                         f"(no real rate constant: {type(err).__name__}); only mass-action "
                         "laws are imported", rid) from None
        except _NotMassAction as err:
            formula = libsbml.formulaToL3String(law.getMath())
            hint = ("; write a reversible reaction as two irreversible ones"
                    if rx.getReversible() else "")
            raise refuse(f"reaction {rid}: kinetic law {formula!r} is not mass action "
                         f"({err}); only mass-action laws are imported{hint}", rid) from None
        rate = _exact(rate, _crn_attributes(rx)[0].get("rate"))
        products = {s: m for s, m in products.items() if s not in fixed}
        for s, m in reactants.items():
            if s in fixed:  # held fixed: what the reaction uses is given back
                products[s] = products.get(s, 0) + m
        reactions.append(Reaction(reactants, products, rate))
    majority = model_attrs.get("majority")
    try:
        return Network.from_reactions(
            model.getName() or model.getId() or "network", species, reactions, volume=volume,
            initial=initial, output=output,
            majority=tuple(majority.split()) if majority else None,
            from_protocol=model_attrs.get("fromProtocol") == "true", about=about or "")
    except ModelError as err:
        raise err.located(file=source) from err
