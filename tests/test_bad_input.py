"""Every kind of bad input: exit status 2 and one line on standard error naming the place."""

import re

import pytest

from crn.cli import main

GOOD = """name = "ok"
[parameters]
n = 10
[initial]
X = "n - 4"
Y = 4
[protocol]
transitions = [
  "X, Y -> X, X",
]
[output]
X = "X"
[question]
majority = ["X", "Y"]
"""


def fail(argv, capsys):
    code = main(argv)
    captured = capsys.readouterr()
    assert code == 2
    assert captured.out == ""
    lines = captured.err.splitlines()
    assert len(lines) == 1, captured.err
    return lines[0]


def write(tmp_path, text):
    path = tmp_path / "model.toml"
    path.write_text(text)
    return str(path)


def test_the_good_model_is_good(tmp_path, capsys):
    assert main(["translate", write(tmp_path, GOOD)]) == 0


# (description, edit of GOOD, expected line or None, expected field, message pattern)
CASES = [
    ("malformed TOML", ("[output]", "[output"), 11, None, "malformed TOML"),
    ("state name not an identifier", ('"X, Y -> X, X"', '"X, 2Y -> X, X"'), 9,
     "protocol.transitions[0]", "not an identifier"),
    ("output names an unknown state", ('X = "X"\n[question]', 'X = "X"\nZ = "Z"\n[question]'),
     13, "output.Z", "appears in no rule and no initial count"),
    ("question names an unknown state", ('["X", "Y"]', '["X", "W"]'), 14, "question.majority",
     "'W' appears in no rule"),
    ("rule with three agents", ('"X, Y -> X, X"', '"X, Y, Y -> X, X, Y"'), 9,
     "protocol.transitions[0]", "3 agent"),
    ("probabilities above 1", ('  "X, Y -> X, X",\n',
                               '  { rule = "X, Y -> X, X", p = 0.6 },\n'
                               '  { rule = "X, Y -> Y, Y", p = 0.5 },\n'),
     10, "protocol.transitions", r"add up to 1.1 > 1"),
    ("negative initial count", ('X = "n - 4"', 'X = "n - 40"'), 5, "initial.X",
     "gives -30, a negative count"),
    ("fractional initial count", ('X = "n - 4"', 'X = "n / 4"'), 5, "initial.X",
     "'n / 4' gives 2.5, not a whole number"),
    ("missing parameter", ('X = "n - 4"', 'X = "m - 4"'), 5, "initial.X",
     "unknown parameter 'm'"),
    ("reaching Python through a call", ('X = "n - 4"', 'X = "__import__(\'os\')"'), 5,
     "initial.X", "call of '__import__' is not allowed"),
    ("reaching Python through an attribute", ('X = "n - 4"', 'X = "n.real"'), 5, "initial.X",
     "attribute is not allowed"),
    ("reaching Python through a parameter", ("n = 10", 'n = "().__class__"'), 3,
     "parameters.n", "is not allowed"),
    ("a complex count", ('X = "n - 4"', 'X = "(-1) ** 0.5"'), 5, "initial.X",
     "complex number"),
    ("a power too large to compute", ('X = "n - 4"', 'X = "(9 ** 4096) ** 4096"'), 5,
     "initial.X", "too large"),
    ("a count beyond 2**60", ('X = "n - 4"', 'X = "2 ** 61"'), 5, "initial.X",
     "above the largest count 2\\*\\*60"),
    ("the reserved label none", ('X = "X"\n[question]', 'X = "none"\n[question]'), 12,
     "output.X", "reserved for runs without consensus"),
    ("a rule repeated in a comment is located at the rule",
     ("transitions = [", '# "X, Y -> X, X" once had p = 0.6\ntransitions = [\n'
      '  { rule = "X, Y -> Y, Y", p = 0.5 },'), 11, "protocol.transitions",
     "add up to 1.5 > 1"),
]


@pytest.mark.parametrize("edit, line, field, pattern", [c[1:] for c in CASES],
                         ids=[c[0] for c in CASES])
def test_bad_model_file(tmp_path, capsys, edit, line, field, pattern):
    old, new = edit
    assert old in GOOD
    path = write(tmp_path, GOOD.replace(old, new, 1))
    for command in ("translate", "check"):
        message = fail([command, path], capsys)
        assert message.startswith(f"crn: {path}:{line}")
        if field:
            assert f"[{field}]" in message
        assert re.search(pattern, message), message


def test_unknown_format(tmp_path, capsys):
    message = fail(["translate", write(tmp_path, GOOD), "--to", "pdf"], capsys)
    assert "'--to'" in message and "'pdf'" in message


def test_missing_file(tmp_path, capsys):
    missing = str(tmp_path / "nothing.toml")
    for command in ("translate", "check"):
        assert fail([command, missing], capsys) == f"crn: {missing}: no such model file"


def test_unknown_set_parameter(tmp_path, capsys):
    path = write(tmp_path, GOOD)
    message = fail(["translate", path, "--set", "m=3"], capsys)
    assert message.startswith(f"crn: {path} [parameters.m]")
    assert "unknown parameter 'm'" in message


def test_malformed_set(tmp_path, capsys):
    message = fail(["check", write(tmp_path, GOOD), "--set", "n"], capsys)
    assert "[--set]" in message and "NAME=VALUE" in message


def test_output_file_in_a_missing_folder(tmp_path, capsys):
    target = tmp_path / "no" / "x.xml"
    message = fail(["translate", write(tmp_path, GOOD), "--to", "sbml", "-o", str(target)],
                   capsys)
    assert str(target.parent) in message and "does not exist" in message
    assert not target.parent.exists()


def test_python_model_that_raises(tmp_path, capsys):
    path = tmp_path / "broken.py"
    path.write_text("def build(parameters):\n    return 1 / 0\n")
    message = fail(["translate", str(path)], capsys)
    assert message.startswith(f"crn: {path}") and "ZeroDivisionError" in message


@pytest.mark.parametrize(
    "argv",
    [
        ["ssa", "models/approximate_majority.toml", "--set", "n=20", "--runs", "2",
         "--csv", "missing-folder/runs.csv"],
        ["ode", "models/approximate_majority.toml", "--plot", "missing-folder/ode.png"],
        ["translate", "models/approximate_majority.toml", "-o", "missing-folder/net.xml"],
    ],
)
def test_output_into_a_missing_folder_fails_before_any_work(argv, capsys):
    # common practice: refuse an unwritable output before a long run, not after it
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "missing-folder" in err and "does not exist" in err


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ("PARAMETERS = [1, 2]\ndef build(p):\n    return None\n", "PARAMETERS must be a dict"),
        ("import sys\nsys.exit(3)\n", "SystemExit"),
        ("from crn.core.generate import protocol_from_rule\n"
         "def build(p):\n"
         "    return protocol_from_rule('x', lambda a, b: (0.5, (b, a)), {'A': 2})\n",
         "wrap randomized outcomes in a list"),
        ("from crn.core.generate import protocol_from_rule\n"
         "def build(p):\n"
         "    return protocol_from_rule('x', lambda a, b: None, {'A': 2}, majority=('A', 'C'))\n",
         "never reaches"),
    ],
)
def test_bad_python_model(tmp_path, capsys, text, pattern):
    path = tmp_path / "model.py"
    path.write_text(text)
    message = fail(["translate", str(path)], capsys)
    assert message.startswith(f"crn: {path}") and re.search(pattern, message), message


@pytest.mark.parametrize(
    ("network", "pattern"),
    [
        ('{"species": [], "reactions": []}', "at least one species"),
        ('{"species": ["A", "B"], "initial": {"A": 1}, "reactions": [], '
         '"majority": [["A"], ["B"]]}', "names two species"),
        ('{"species": ["A"], "initial": {"A": 99999999999999999999}, "reactions": []}',
         "whole number from 0 to 2\\*\\*60"),
        ('{"species": ["A"], "initial": {"A": 1}, "reactions": [{"reactants": {"A": 1}, '
         '"products": {}, "rate": -1}]}', "reactions\\[0\\]"),
    ],
)
def test_bad_json_network(tmp_path, capsys, network, pattern):
    path = tmp_path / "net.json"
    path.write_text(network)
    message = fail(["translate", str(path)], capsys)
    assert re.search(pattern, message), message


def test_a_reaction_that_never_fires_is_one_warning_line(tmp_path, capsys):
    path = tmp_path / "z.toml"
    path.write_text('name = "n"\n[initial]\nX = 2\n[network]\n'
                    'reactions = [{ reaction = "X -> 0", rate = 0 }]\n')
    assert main(["translate", str(path)]) == 0
    err = capsys.readouterr().err
    assert err == f"crn: warning: {path}:5 [network.reactions[0]]: reaction 'X -> 0' has rate 0 " \
                  "and never fires\n"
