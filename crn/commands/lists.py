"""Comma-separated lists of numbers on the command line (``--n 100,1e3``)."""

from __future__ import annotations

from crn.core.errors import CRNError

__all__ = ["parse_int_list", "parse_float_list"]


def _number(text: str, what: str) -> float:
    try:
        return float(text)
    except ValueError as err:
        raise CRNError(f"{what}: cannot read {text!r} as a number") from err


def parse_int_list(text: str, what: str) -> list[int]:
    """``"100,1e3,10000"`` -> ``[100, 1000, 10000]``; whole numbers only."""
    out = []
    for item in text.split(","):
        value = _number(item.strip(), what)
        if not value.is_integer():
            raise CRNError(f"{what}: {item.strip()!r} is not a whole number")
        out.append(int(value))
    return out


def parse_float_list(text: str, what: str) -> list[float]:
    """``"0.001,0.01"`` -> ``[0.001, 0.01]``."""
    return [_number(item.strip(), what) for item in text.split(",")]
