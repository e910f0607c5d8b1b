"""DNA strand-displacement implementations of formal networks.

``implement(formal, scheme, params)`` turns a formal network into the network
of a DNA implementation (:class:`Implementation`), in lab-unit parameters
(:class:`DnaParameters`); :data:`SCHEMES` is the table of schemes, one module
each (a new scheme is one file and one entry here).
"""

from __future__ import annotations

from crn.dna.implementation import ROLES, Implementation, Module
from crn.dna.parameters import (
    DEFAULT_FUEL_EXCESS,
    DEFAULT_TOEHOLD,
    LEAK_TYPICAL,
    DnaParameterError,
    DnaParameters,
    toehold_rate,
)
from crn.dna.schemes import SCHEMES, implement

__all__ = ["DnaParameters", "DnaParameterError", "Implementation", "Module", "implement",
           "SCHEMES", "ROLES", "toehold_rate", "DEFAULT_FUEL_EXCESS", "DEFAULT_TOEHOLD",
           "LEAK_TYPICAL"]
