"""Hostile and malformed input, fuzzed (README, "Reliability").

Every reader either accepts its input or raises CRNError, which the command line
prints as one line with exit status 2; nothing else escapes (that would be a
traceback), no example may take longer than the hypothesis deadline (a hang), and
the hand-picked hostile inputs stay within a stated memory bound (tracemalloc).
"""

import json
import math
import os
import tempfile
import tracemalloc
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import crn.io.models as models
from crn.cli import main
from crn.core.errors import CRNError, ExpressionError
from crn.core.expr import FUNCTIONS, evaluate
from crn.core.network import Network
from crn.core.units import parse_concentration, parse_rate_constant, parse_time, parse_volume
from crn.io.contract import network_from_dict, network_from_json, network_to_dict
from crn.io.models import load_model
from crn.io.sbml import network_from_sbml, network_to_sbml

AM_TEXT = Path("models/approximate_majority.toml").read_text()
BD_TEXT = Path("models/birth_death.toml").read_text()
FUZZ = settings(max_examples=150, deadline=2000,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
MEMORY_BOUND = 64 * 2**20  # bytes: peak Python allocation while reading one hostile input


def accepts_or_refuses(read, *args):
    """``read(*args)`` returns, or raises CRNError with a non-empty message."""
    try:
        return read(*args)
    except CRNError as err:
        assert str(err).strip()
        return None


# -- expressions -------------------------------------------------------------------------------

numbers = st.one_of(st.integers(-10**30, 10**30), st.floats(allow_nan=True, allow_infinity=True),
                    st.sampled_from(["1e308", "1e-320", "0", "10**10**10", "2**4096", "9" * 400,
                                     "nan", "inf", "-inf", "1_000", "0x1F", "1j", "True"]))
leaves = st.one_of(numbers.map(str), st.sampled_from(["n", "gap", "k", "undefined", "__import__"]))


def combine(children):
    operator = st.sampled_from(["+", "-", "*", "/", "//", "%", "**"])
    function = st.sampled_from([*FUNCTIONS, "eval", "open", "exit"])
    return st.one_of(
        st.tuples(children, operator, children).map(lambda t: f"({t[0]} {t[1]} {t[2]})"),
        st.tuples(function, st.lists(children, max_size=3)).map(
            lambda t: f"{t[0]}({', '.join(t[1])})"),
        children.map(lambda c: f"-{c}"),
        children.map(lambda c: f"{c}.real"), children.map(lambda c: f"[{c}][0]"),
    )


expressions = st.one_of(st.recursive(leaves, combine, max_leaves=12), st.text(max_size=60))


@FUZZ
@given(expressions)
def test_expression_evaluator_returns_a_number_or_refuses(text):
    try:
        value = evaluate(text, {"n": 100, "gap": 4, "k": 1e-12})
    except ExpressionError as err:
        assert str(err)
        return
    assert isinstance(value, int | float) and not isinstance(value, bool)
    assert isinstance(value, int) or math.isfinite(value)


@pytest.mark.parametrize("text", ["(" * 5000 + "1" + ")" * 5000, "-" * 990 + "1",
                                  "10**10**10", "2**2**2**2**2", "9" * 999, "1e999999",
                                  "max(" * 300 + "1" + ")" * 300, "(1,)*10**9"])
def test_pathological_expressions_refuse_quickly_and_small(text):
    tracemalloc.start()
    try:
        with pytest.raises(ExpressionError):
            value = evaluate(text)
            # a whole number is exact whatever its size (counts are checked where they are
            # used, against 2**60); only the 999-digit one gets here
            assert text == "9" * 999 and value == 10**999 - 1
            raise ExpressionError("exact")
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < MEMORY_BOUND


# -- units -------------------------------------------------------------------------------------

unit_texts = st.one_of(
    st.tuples(numbers.map(str), st.sampled_from(["", " ", "\t"]),
              st.sampled_from(["nM", "uM", "µM", "M", "fL", "pL", "L", "s", "min", "h", "/M/s",
                               "/nM/s", "M^-1 s^-1", "nm", "xM", "", "%", "nM/s"])).map("".join),
    st.text(max_size=30))


@FUZZ
@given(unit_texts)
def test_unit_parsers_return_a_positive_finite_value_or_refuse(text):
    for parse in (parse_concentration, parse_volume, parse_time, parse_rate_constant):
        value = accepts_or_refuses(parse, text)
        if value is not None:
            assert math.isfinite(value) and value > 0, (parse.__name__, text, value)


# -- model files (TOML and Python) -------------------------------------------------------------

def load_text(text, suffix=".toml"):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / f"model{suffix}"
        path.write_text(text, encoding="utf-8")
        return accepts_or_refuses(load_model, path)


fields = st.one_of(expressions, st.text(max_size=40),
                   st.sampled_from(['"X, Y -> X"', "nan", "inf", "-1", "1e400", '"n/0"', "[]",
                                    "{}", '"X,Y->X,B"', '"Ｘ, Y -> X, B"', '"X, X -> X, X"']))


@FUZZ
@given(st.sampled_from(["1000", "10", '"(n + gap) / 2"', '"(n - gap) / 2"', '"X, Y -> X, B"',
                        '"X"', '["X", "Y"]']), fields, st.booleans())
def test_model_loader_accepts_or_refuses_mutated_models(target, replacement, quote):
    value = json.dumps(replacement) if quote else replacement
    text = AM_TEXT.replace(target, value, 1)
    model = load_text(text)
    if model is not None:
        assert model.network.n_species >= 1


@FUZZ
@given(st.text(max_size=400))
def test_model_loader_accepts_or_refuses_any_text(text):
    load_text(text)


@FUZZ
@given(st.binary(max_size=300))
def test_model_loader_accepts_or_refuses_any_bytes(data):
    with tempfile.TemporaryDirectory() as folder:
        for suffix in (".toml", ".json", ".xml"):
            path = Path(folder) / f"model{suffix}"
            path.write_bytes(data)
            accepts_or_refuses(load_model, path)


def test_a_100_megabyte_file_is_refused_unread(tmp_path):
    path = tmp_path / "huge.toml"
    with open(path, "wb") as fh:
        fh.truncate(100 * 2**20)  # 100 MB (sparse: no disk needed)
    tracemalloc.start()
    try:
        with pytest.raises(CRNError, match="100 MiB, more than a model file may have"):
            load_model(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 2**20  # the file is never read


def test_deeply_nested_toml_and_json_are_refused(tmp_path):
    (tmp_path / "deep.toml").write_text(BD_TEXT + "\nx = " + "[" * 100000 + "]" * 100000 + "\n")
    (tmp_path / "deep.json").write_text("[" * 100000 + "]" * 100000)
    for name in ("deep.toml", "deep.json"):
        with pytest.raises(CRNError, match="nested too deeply"):
            load_model(tmp_path / name)


def test_nan_and_inf_as_text_are_refused(tmp_path):
    for value in ("nan", "inf", '"1e999"', '"nan"', '"-inf"', "-1e-400"):
        path = tmp_path / "m.toml"
        path.write_text(BD_TEXT.replace("birth = 10.0", f"birth = {value}"))
        model = accepts_or_refuses(load_model, path)
        assert model is None or (value == "-1e-400" and model.network.rates[0] == 0.0), value
    data = network_to_dict(load_model("models/birth_death.toml").network)
    for bad in ("NaN", "Infinity", "-Infinity", "1e999"):
        text = json.dumps(data).replace('"rate": 10', f'"rate": {bad}', 1)
        assert bad in text
        with pytest.raises(CRNError, match="finite"):
            network_from_json(text)


def test_names_that_collide_after_normalisation_are_refused(tmp_path):
    # fullwidth X and decomposed e-acute would be X and e-acute after Unicode (NFKC)
    # normalisation; only ASCII identifiers are accepted, so no two names can collide
    for name in ("Ｘ", "e\u0301", "X ", "x\u200b"):
        rule = AM_TEXT.replace('"Y, B -> Y, Y",', f'"Y, B -> Y, Y",\n  "{name}, B -> X, X",')
        assert load_text(rule) is None, name
        data = network_to_dict(load_model(AM, {"n": 10}).network)
        data["species"][2] = name
        with pytest.raises(CRNError):
            network_from_dict(data)


AM = "models/approximate_majority.toml"


def test_python_model_that_raises_exits_2_with_one_line(tmp_path, capsys):
    for body in ("raise ValueError('boom')", "import sys; sys.exit(3)", "raise KeyboardInterrupt",
                 "def f(): return f()\nf()", "PARAMETERS = {}\ndef build(p): return 1 / 0"):
        path = tmp_path / "model.py"
        path.write_text(body + "\n")
        assert main(["check", str(path)]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and err[0].startswith(f"crn: {path}:"), err


def test_python_model_that_loops_is_stopped_with_a_clear_message(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(models, "PYTHON_MODEL_TIMEOUT", 0.5)
    for body in ("while True:\n    pass", "PARAMETERS = {}\ndef build(p):\n    while True:\n"
                                           "        pass"):
        path = tmp_path / "model.py"
        path.write_text(body + "\n")
        assert main(["check", str(path)]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert err == [f"crn: {path}: the Python model did not finish within 0.5 s (an endless "
                       "loop?); it was stopped"]


# -- SBML --------------------------------------------------------------------------------------

SBML = network_to_sbml(load_model(AM, {"n": 20, "gap": 2}).network)


@FUZZ
@given(st.integers(0, len(SBML)), st.integers(0, 200), st.text(max_size=40))
def test_sbml_reader_accepts_or_refuses_mutated_documents(start, length, insert):
    text = SBML[:start] + insert + SBML[start + length:]
    net = accepts_or_refuses(network_from_sbml, text)
    if net is not None:
        assert isinstance(net, Network)


@pytest.mark.parametrize("attribute", ['size="19"', 'initialAmount="11"', 'stoichiometry="1"',
                                       'id="X"', 'volume="19.0"', 'majority="X Y"'])
@pytest.mark.parametrize("value", ["NaN", "INF", "-INF", "1e999", "-1", "0", "1e-320", "",
                                   "X Y Z", "2.5", "&amp;", "9" * 40])
def test_sbml_reader_refuses_bad_numbers(attribute, value):
    # regression cases found by the fuzzing: a NaN initial amount raised ValueError, and a
    # stoichiometry of 1e40 made the mass-action check expand a product of 1e40 factors
    name = attribute.split("=")[0]
    accepts_or_refuses(network_from_sbml, SBML.replace(attribute, f'{name}="{value}"'))


def test_billion_laughs_entities_are_refused_small_and_fast(tmp_path):
    entities = "".join(f'<!ENTITY l{i} "' + (f"&l{i - 1};" * 10 if i else "lol") + '">\n'
                       for i in range(10))
    text = SBML.replace('<?xml version="1.0" encoding="UTF-8"?>\n',
                        f'<?xml version="1.0"?>\n<!DOCTYPE sbml [\n{entities}]>\n')
    text = text.replace('name="three-state approximate majority"', 'name="&l9;"', 1)
    path = tmp_path / "laughs.xml"
    path.write_text(text)
    tracemalloc.start()
    try:
        with pytest.raises(CRNError, match="entity declarations"):
            load_model(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < MEMORY_BOUND


# -- JSON networks -----------------------------------------------------------------------------

json_values = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(-2**70, 2**70),
              st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8)),
    lambda children: st.one_of(st.lists(children, max_size=4),
                               st.dictionaries(st.text(max_size=8), children, max_size=4)),
    max_leaves=20)
CONTRACT = network_to_dict(load_model(AM, {"n": 20, "gap": 2}).network)


@FUZZ
@given(json_values)
def test_json_reader_accepts_or_refuses_any_json(value):
    accepts_or_refuses(network_from_json, json.dumps(value))


@FUZZ
@given(st.sampled_from(sorted(CONTRACT)), json_values, st.integers(0, 3))
def test_json_reader_accepts_or_refuses_mutated_contracts(key, value, depth):
    data = json.loads(json.dumps(CONTRACT))
    if depth and isinstance(data[key], list) and data[key]:
        item = data[key][depth % len(data[key])]
        if isinstance(item, dict):
            item[sorted(item)[depth % len(item)]] = value
        else:
            data[key][depth % len(data[key])] = value
    else:
        data[key] = value
    net = accepts_or_refuses(network_from_dict, data)
    if net is not None:
        assert (net.initial >= 0).all() and (net.rates >= 0).all()
        assert all(math.isfinite(r) for r in net.rates)


def test_cli_turns_every_refusal_into_one_line(tmp_path, capsys):
    cases = {"bad.toml": "name = 'x'\n[initial]\nX = '10**10**10'\n",
             "bad.json": "[" * 5000 + "]" * 5000, "bad.xml": "<sbml>&undefined;</sbml>",
             "bad.sbml": "\x00\x01", "bad.py": "raise RuntimeError('no')\n"}
    for name, text in cases.items():
        (tmp_path / name).write_text(text)
        assert main(["check", str(tmp_path / name)]) == 2, name
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and err[0].startswith("crn: ") and "Traceback" not in err[0], err
    assert os.listdir(tmp_path)  # inputs untouched
