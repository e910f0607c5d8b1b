"""Physical quantities as people write them: strict parsing, copy numbers and time scales.

Concentrations (``10nM``), volumes (``5 uL``), bimolecular rate constants
(``1e6/M/s``) and times (``2h``) are parsed strictly: a unit that is not in the
accepted list is an error whose message lists the accepted units. Copy numbers
follow ``n = C V N_A`` with the exact SI 2019 Avogadro constant, and one unit
of parallel time of a protocol built at ``k_phys`` and total concentration
``C`` lasts ``1 / (k_phys C)`` seconds (docs/design.md, physical units).
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

from crn.core.errors import CRNError

__all__ = [
    "AVOGADRO",
    "CONCENTRATION_UNITS",
    "VOLUME_UNITS",
    "TIME_UNITS",
    "RATE_UNITS_HELP",
    "parse_concentration",
    "parse_volume",
    "parse_time",
    "parse_rate_constant",
    "copies",
    "concentration_for",
    "volume_for",
    "seconds_per_parallel_time",
    "to_seconds",
    "to_parallel_time",
    "format_concentration",
    "format_volume",
    "format_time",
    "format_rate_constant",
    "WET_LAB_CAUTION",
]

#: Carried by every output holding wet-lab numbers (text, JSON ``caution``, CSV, figures).
WET_LAB_CAUTION = ("Wet-lab numbers (copies, concentrations, volumes, times) are predictions of "
                   "a mathematical model (ideal mass-action kinetics, no leak or strand loss), "
                   "not measurements: validate them with your lab's own controls and follow its "
                   "validation and safety practice before relying on them.")

#: Avogadro constant in 1/mol, exact by definition since the 2019 SI.
AVOGADRO = 6.02214076e23

_MICRO = ("u", "\u00b5", "\u03bc")  # ASCII u, micro sign, Greek mu

#: Concentration units in mol/L.
CONCENTRATION_UNITS = {"M": 1.0, "mM": 1e-3, "nM": 1e-9, "pM": 1e-12, "fM": 1e-15}
CONCENTRATION_UNITS.update({f"{mu}M": 1e-6 for mu in _MICRO})
#: Volume units in litres (``l`` is accepted beside ``L``).
VOLUME_UNITS = {}
for _letter in ("L", "l"):
    VOLUME_UNITS.update({_letter: 1.0, f"m{_letter}": 1e-3, f"n{_letter}": 1e-9,
                         f"p{_letter}": 1e-12, f"f{_letter}": 1e-15})
    VOLUME_UNITS.update({f"{mu}{_letter}": 1e-6 for mu in _MICRO})
#: Time units in seconds.
TIME_UNITS = {"s": 1.0, "sec": 1.0, "min": 60.0, "h": 3600.0, "hr": 3600.0}
RATE_UNITS_HELP = "/M/s, M^-1 s^-1 (any concentration unit for M, s, min or h for s)"

_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_SPLIT = re.compile(rf"^\s*({_NUMBER})?\s*(.*?)\s*$")


_ACCEPTED = {
    "concentration": "M, mM, uM (or \u00b5M), nM, pM, fM",
    "volume": "L, mL, uL (or \u00b5L), nL, pL, fL",
    "time": "s, min, h",
    "rate constant": RATE_UNITS_HELP,
}


def _split(text, what: str, accepted: str):
    if not isinstance(text, str):
        raise CRNError(f"{what} must be text such as '10nM', got {text!r}")
    match = _SPLIT.match(text)
    if not match or match.group(1) is None:
        raise CRNError(f"cannot read {text!r} as a {what}: expected a number and a unit; "
                       f"accepted units: {accepted}")
    return match.group(1), match.group(2)


def _positive(value: float, text: str, what: str) -> float:
    if not math.isfinite(value) or value <= 0:
        raise CRNError(f"{what} must be a positive finite number, got {text!r}")
    return value


def _times(number: str, factor: float) -> float:
    """``number * factor`` rounded once: powers of ten are applied in decimal (2.5 uM is 2.5e-6)."""
    exponent = round(math.log10(factor))
    if abs(10.0**exponent / factor - 1) < 1e-12:
        return float(Decimal(number).scaleb(exponent))
    return float(number) * factor


def _simple(text, what: str, table: dict) -> float:
    accepted = _ACCEPTED[what]
    number, unit = _split(text, what, accepted)
    if not unit:
        raise CRNError(f"{what} {text!r} has no unit; accepted units: {accepted}")
    if unit not in table:
        raise CRNError(f"unknown {what} unit {unit!r} in {text!r}; accepted units: {accepted}")
    return _positive(_times(number, table[unit]), text, what)


def parse_concentration(text: str) -> float:
    """Read a concentration such as ``"10nM"`` or ``"2.5 µM"``.

    Parameters
    ----------
    text : str
        A number followed by one of M, mM, uM (or µM), nM, pM, fM. Unit symbols
        are case-sensitive (``nm`` is a length, not a concentration).

    Returns
    -------
    float
        The concentration in mol/L.

    Raises
    ------
    CRNError
        For a missing or unknown unit (the message lists the accepted units)
        or a value that is not positive.

    Examples
    --------
    >>> parse_concentration("10nM")
    1e-08
    """
    return _simple(text, "concentration", CONCENTRATION_UNITS)


def parse_volume(text: str) -> float:
    """Read a volume such as ``"5uL"`` or ``"1 pL"``; returns litres.

    Accepted units: L, mL, uL (µL), nL, pL, fL (lower-case ``l`` also accepted).

    Raises
    ------
    CRNError
        For a missing or unknown unit or a value that is not positive.
    """
    return _simple(text, "volume", VOLUME_UNITS)


def parse_time(text: str) -> float:
    """Read a physical time such as ``"2h"``, ``"90 min"`` or ``"30s"``; returns seconds.

    Raises
    ------
    CRNError
        For a missing or unknown unit or a value that is not positive.
    """
    return _simple(text, "time", TIME_UNITS)


_RATE_FORMS = (
    re.compile(r"^/\s*(?P<c>[^/\s]+)\s*/\s*(?P<t>[A-Za-z]+)$"),                # /M/s
    re.compile(r"^(?P<c>[^\s^*\u00b7]+)\s*\^?\s*-1\s*[\s*\u00b7]\s*(?P<t>[A-Za-z]+)\s*\^?\s*-1$"),
    re.compile(r"^/\s*\(\s*(?P<c>\S+)\s*[\s*\u00b7]\s*(?P<t>[A-Za-z]+)\s*\)$"),  # /(M s)
)


def parse_rate_constant(text: str) -> float:
    """Read a bimolecular rate constant such as ``"1e6/M/s"`` or ``"1e6 M^-1 s^-1"``.

    Parameters
    ----------
    text : str
        A number and a unit ``/C/T``, ``C^-1 T^-1`` or ``/(C T)`` with ``C`` a
        concentration unit and ``T`` a time unit. A bare number (no unit) is
        rejected like any other bare quantity.

    Returns
    -------
    float
        The rate constant in 1/(M s).

    Raises
    ------
    CRNError
        For a missing or unknown unit (the message lists the accepted forms)
        or a value that is not positive.
    """
    number, unit = _split(text, "rate constant", RATE_UNITS_HELP)
    if not unit:
        raise CRNError(f"rate constant {text!r} has no unit; accepted units: {RATE_UNITS_HELP}")
    for form in _RATE_FORMS:
        match = form.match(unit)
        if match and match.group("c") in CONCENTRATION_UNITS and match.group("t") in TIME_UNITS:
            value = _times(number, 1.0 / CONCENTRATION_UNITS[match.group("c")])
            return _positive(value / TIME_UNITS[match.group("t")], text, "rate constant")
    raise CRNError(f"unknown rate-constant unit {unit!r} in {text!r}; accepted units: "
                   f"{RATE_UNITS_HELP}")


def _check(name: str, value: float) -> float:
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise CRNError(f"`{name}` must be a positive finite number, got {value!r}")
    return value


def copies(concentration_molar: float, volume_liters: float) -> float:
    """Molecules in a volume: ``n = C V N_A``.

    Parameters
    ----------
    concentration_molar : float
        Total concentration C in mol/L.
    volume_liters : float
        Volume V in L.

    Returns
    -------
    float
        The (real-valued) copy number.

    References
    ----------
    BIPM, The International System of Units (SI), 9th edition, 2019: N_A exact.

    Examples
    --------
    >>> copies(1e-9, 1e-6)  # 1 nM in 1 uL
    602214076.0
    """
    return _check("concentration_molar", concentration_molar) * \
        _check("volume_liters", volume_liters) * AVOGADRO


def concentration_for(n: float, volume_liters: float) -> float:
    """Concentration (mol/L) that puts ``n`` molecules in ``volume_liters``."""
    return _check("n", n) / (_check("volume_liters", volume_liters) * AVOGADRO)


def volume_for(n: float, concentration_molar: float) -> float:
    """Volume (L) that holds ``n`` molecules at ``concentration_molar``."""
    return _check("n", n) / (_check("concentration_molar", concentration_molar) * AVOGADRO)


def seconds_per_parallel_time(rate: float, concentration_molar: float) -> float:
    """Seconds in one unit of parallel time: ``1 / (k_phys C)``.

    Parameters
    ----------
    rate : float
        The physical rate constant k_phys (1/(M s)) that a protocol reaction of
        rate 1 is built at.
    concentration_molar : float
        Total concentration C of all agents (mol/L).
    """
    return 1.0 / (_check("rate", rate) * _check("concentration_molar", concentration_molar))


def to_seconds(parallel_time: float, rate: float, concentration_molar: float) -> float:
    """Convert parallel time into seconds at rate ``rate`` and total concentration."""
    return float(parallel_time) * seconds_per_parallel_time(rate, concentration_molar)


def to_parallel_time(seconds: float, rate: float, concentration_molar: float) -> float:
    """Convert seconds into parallel time at rate ``rate`` and total concentration."""
    return float(seconds) / seconds_per_parallel_time(rate, concentration_molar)


def _scaled(value: float, table: list[tuple[str, float]], digits: int) -> str:
    if not math.isfinite(value):
        return str(value)
    for unit, size in table:
        if abs(value) >= size * (1 - 1e-12):
            return f"{value / size:.{digits}g} {unit}"
    unit, size = table[-1]
    return f"{value / size:.{digits}g} {unit}"


def format_concentration(molar: float, digits: int = 3) -> str:
    """Write a concentration with a readable prefix: ``1e-8`` -> ``"10 nM"``."""
    table = [("M", 1.0), ("mM", 1e-3), ("uM", 1e-6), ("nM", 1e-9), ("pM", 1e-12), ("fM", 1e-15)]
    return _scaled(molar, table, digits)


def format_volume(liters: float, digits: int = 3) -> str:
    """Write a volume with a readable prefix: ``2e-12`` -> ``"2 pL"``."""
    table = [("L", 1.0), ("mL", 1e-3), ("uL", 1e-6), ("nL", 1e-9), ("pL", 1e-12), ("fL", 1e-15)]
    return _scaled(liters, table, digits)


def format_time(seconds: float, digits: int = 3) -> str:
    """Write a duration in s, min or h, whichever reads best: ``5400`` -> ``"1.5 h"``."""
    return _scaled(seconds, [("h", 3600.0), ("min", 60.0), ("s", 1.0)], digits)


def format_rate_constant(per_molar_second: float, digits: int = 3) -> str:
    """Write a bimolecular rate constant in /M/s: ``1e6`` -> ``"1e+06 /M/s"``."""
    return f"{per_molar_second:.{digits}g} /M/s"
