"""The safe expression evaluator of model files."""

import math

import pytest

from crn.core.errors import ExpressionError
from crn.core.expr import evaluate, names_in


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("(n + gap) / 2", 55.0),
        ("(n + gap) // 2", 55),
        ("n % 7", 100 % 7),
        ("2 ** 10", 1024),
        ("-gap + +n", 90),
        ("sqrt(n)", 10.0),
        ("log(n, 10)", 2.0),
        ("ln(n)", math.log(100)),
        ("log2(1024)", 10.0),
        ("ceil(n / 3) + floor(n / 3)", 34 + 33),
        ("min(n, gap) + max(n, gap) + abs(-3)", 113),
    ],
)
def test_arithmetic_matches_python_semantics(text, expected):
    # common practice: the operators keep Python's numeric meaning
    assert evaluate(text, {"n": 100, "gap": 10}) == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("__import__('os')", "not allowed"),
        ("n.real", "attribute"),
        ("().__class__", "not allowed"),
        ("[1, 2][0]", "not allowed"),
        ("'abc'", "only numbers"),
        ("open('x')", "not allowed"),
        ("lambda: 1", "not allowed"),
        ("m + 1", "unknown parameter 'm'"),
        ("1 / 0", "cannot evaluate"),
        ("2 ** 100000", "too large"),
        ("(n + ", "cannot parse"),
        ("sqrt", "must be called"),
        ("sqrt(x=4)", "keyword"),
    ],
)
def test_everything_but_arithmetic_is_refused(text, message):
    with pytest.raises(ExpressionError, match=message):
        evaluate(text, {"n": 100})


def test_numbers_pass_through_and_bools_do_not():
    assert evaluate(7) == 7
    assert evaluate(2.5) == 2.5
    with pytest.raises(ExpressionError):
        evaluate(True)


def test_names_in_lists_parameters_not_functions():
    assert names_in("sqrt(n) + gap * 2") == {"n", "gap"}
