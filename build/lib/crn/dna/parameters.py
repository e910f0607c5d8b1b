"""Non-ideal kinetics of a DNA implementation, in lab units.

The parameters a designer sets for a strand-displacement implementation of a
formal network: the physical rate one unit of formal rate stands for, the
signal concentration scale, the fuel (gate) concentration, the fastest
strand-displacement rate constant (directly, or from a toehold length) and a
leak rate constant. Every value is checked when the object is built; an
invalid one raises :class:`DnaParameterError` naming the field.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from crn.core.errors import CRNError

__all__ = [
    "DnaParameters",
    "DnaParameterError",
    "DEFAULT_FUEL_EXCESS",
    "DEFAULT_TOEHOLD",
    "TOEHOLD_SATURATED_RATE",
    "LEAK_TYPICAL",
    "toehold_rate",
]

#: Default fuel concentration as a multiple of the signal concentration C. The
#: construction approaches the formal kinetics only when every gate stays far above
#: every signal (Soloveichik, Seelig & Winfree, PNAS 107:5393, 2010), so the default
#: is a hundredfold excess; ``crn implement --fuel`` sets it in molar.
DEFAULT_FUEL_EXCESS = 100.0
#: Default toehold length (nt) when neither ``max_rate`` nor ``toehold`` is given:
#: long enough that the displacement rate is saturated (Zhang & Winfree 2009).
DEFAULT_TOEHOLD = 7
#: Saturated toehold-mediated strand-displacement rate constant (/M/s). From memory of
#: Zhang & Winfree, JACS 131:17303-17314, 2009 (Fig. 3: strong toeholds of 6-7 nt or
#: more plateau at a few 10^6 /M/s, 25 C, 12.5 mM Mg2+); check against the paper
#: before relying on the third digit.
TOEHOLD_SATURATED_RATE = 6.0e6
#: Rate constant of displacement with no toehold (/M/s), the low end of the same
#: curve; from memory of Zhang & Winfree 2009 (order 1 /M/s).
_ZERO_TOEHOLD_RATE = 1.0
#: Fold increase of the rate per added toehold nucleotide below saturation: from
#: memory of Zhang & Winfree 2009 (about one decade per nucleotide, 0 to 6 nt).
_FOLD_PER_NT = 10.0
#: Typical leak rate constants (/M/s) for a fuel-gate (or fuel-fuel) reaction that
#: releases an output without its input, with their sources. They are order-of-magnitude
#: guides for choosing ``leak``; the leak of a real design must be measured.
LEAK_TYPICAL = {
    "blunt-end (no toehold) displacement, Zhang & Winfree 2009 (from memory)": 1.0,
    "translator and seesaw gates with clamps, order reported in Qian & Winfree, "
    "Science 332:1196, 2011 and Thachuk, Winfree & Soloveichik, DNA 21, 2015 "
    "(from memory)": 10.0,
    "unclamped gates, a few frayed base pairs acting as a toehold (same sources, "
    "from memory)": 100.0,
}


class DnaParameterError(CRNError, ValueError):
    """A DNA parameter is out of range or impossible; ``field`` names it.

    Parameters
    ----------
    message : str
    field : str
        The parameter at fault: ``rate``, ``concentration``, ``fuel``, ``max_rate``,
        ``toehold`` or ``leak``.
    """

    def __init__(self, message: str, field: str):
        self.field = field
        super().__init__(message)


def toehold_rate(toehold: int) -> float:
    """Toehold-mediated strand-displacement rate constant for a toehold length.

    About one decade per nucleotide from ~1 /M/s with no toehold, saturating at
    :data:`TOEHOLD_SATURATED_RATE` (Zhang & Winfree, JACS 131:17303-17314,
    2009; the curve is the measured trend for toeholds of average strength, its
    constants quoted from memory).

    Parameters
    ----------
    toehold : int
        Toehold length in nucleotides, 0 to 30.

    Returns
    -------
    float
        Rate constant in /M/s.

    Raises
    ------
    DnaParameterError
        If ``toehold`` is not a whole number from 0 to 30.
    """
    if isinstance(toehold, bool) or not isinstance(toehold, int) or not 0 <= toehold <= 30:
        raise DnaParameterError(f"toehold must be a whole number of nucleotides from 0 to 30, "
                                f"got {toehold!r}", "toehold")
    return min(TOEHOLD_SATURATED_RATE, _ZERO_TOEHOLD_RATE * _FOLD_PER_NT ** toehold)


def _positive(value, field: str, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise DnaParameterError(f"{field} must be a number in {unit}, got {value!r}", field)
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise DnaParameterError(f"{field} must be a positive finite number in {unit}, "
                                f"got {value!r}", field)
    return value


@dataclass(frozen=True)
class DnaParameters:
    """Lab-unit parameters of a DNA implementation (validated when built).

    Attributes
    ----------
    rate : float
        Bimolecular rate constant (/M/s) that one unit of formal rate stands for
        (k_phys): a formal reaction of rate k is implemented at ``k * rate``.
    concentration : float
        Total signal concentration C (M) that the formal population (or the
        formal network's volume) stands for.
    fuel : float or None
        Initial concentration (M) of each fuel, gate and helper species, C_max in
        the 2010 construction. Default ``DEFAULT_FUEL_EXCESS * concentration``.
    max_rate : float or None
        Largest strand-displacement rate constant q_max (/M/s). Default from
        ``toehold`` (:func:`toehold_rate`), or from :data:`DEFAULT_TOEHOLD`.
    toehold : int or None
        Toehold length (nt); an alternative to ``max_rate``, not both.
    leak : float
        Rate constant (/M/s) of the fuel-fuel reaction that releases a formal
        reaction's outputs without its inputs; 0 (default) for no leak.
        Typical magnitudes: :data:`LEAK_TYPICAL`.

    Raises
    ------
    DnaParameterError
        For a value out of range, naming the field.
    """

    rate: float
    concentration: float
    fuel: float | None = None
    max_rate: float | None = None
    toehold: int | None = None
    leak: float = 0.0

    def __post_init__(self):
        _positive(self.rate, "rate", "/M/s")
        _positive(self.concentration, "concentration", "M")
        if self.fuel is not None:
            _positive(self.fuel, "fuel", "M")
        if self.max_rate is not None:
            _positive(self.max_rate, "max_rate", "/M/s")
            if self.toehold is not None:
                raise DnaParameterError("give max_rate or toehold, not both", "toehold")
        if self.toehold is not None:
            toehold_rate(self.toehold)
        leak = self.leak
        if isinstance(leak, bool) or not isinstance(leak, int | float) or not math.isfinite(leak) \
                or leak < 0:
            raise DnaParameterError(f"leak must be a finite rate constant >= 0 in /M/s, "
                                    f"got {leak!r}", "leak")
        if self.fuel_molar <= self.concentration:
            raise DnaParameterError(
                f"fuel ({self.fuel_molar:.3g} M) must exceed the signal concentration "
                f"({self.concentration:.3g} M): the gates would run out before the signals "
                f"react", "fuel")

    @property
    def fuel_molar(self) -> float:
        """Fuel concentration C_max in M (the default applied)."""
        return float(self.fuel) if self.fuel is not None else \
            DEFAULT_FUEL_EXCESS * float(self.concentration)

    @property
    def q_max(self) -> float:
        """Largest strand-displacement rate constant in /M/s (the default applied)."""
        if self.max_rate is not None:
            return float(self.max_rate)
        return toehold_rate(DEFAULT_TOEHOLD if self.toehold is None else self.toehold)

    @property
    def seconds_per_time_unit(self) -> float:
        """Seconds in one unit of formal time: ``1 / (rate * concentration)``."""
        return 1.0 / (float(self.rate) * float(self.concentration))

    def as_dict(self) -> dict:
        """The parameters with defaults applied, in lab units (for JSON)."""
        return {"rate_per_molar_second": float(self.rate),
                "concentration_molar": float(self.concentration),
                "fuel_molar": self.fuel_molar, "max_rate_per_molar_second": self.q_max,
                "toehold_nt": self.toehold, "leak_per_molar_second": float(self.leak)}
