"""crn: population protocols as reaction networks; mean field and exact stochastics side by side.

The names below are loaded on first use, so ``import crn`` (and the command
line's start-up) costs no numpy, scipy or numba import.
"""

import sys
import types

from crn._lazy import lazy_exports
from crn._moved import install as _install_moved_names

_install_moved_names()

__version__ = "0.2.0.dev0"

#: Public name -> module that defines it (relative to ``crn``).
_HOME = {
    "CRNError": "core.errors",
    "ExpressionError": "core.errors",
    "ModelError": "core.errors",
    "Model": "core.model",
    "parse_model": "core.model",
    "Network": "core.network",
    "Reaction": "core.network",
    "deterministic_rates": "core.network",
    "propensities": "core.network",
    "Outcome": "core.protocol",
    "Protocol": "core.protocol",
    "network_to_protocol": "core.translate",
    "protocol_to_network": "core.translate",
    "load_model": "io.models",
    "solve_mean_field": "solvers.ode",
    "find_fixed_points": "solvers.fixed_points",
    "simulate": "solvers.simulate",
    "exact_outcomes": "solvers.exact",
    "regime_map": "analyses.regimes",
    "smallest_n": "analyses.copies",
    "verify": "analyses.verify",
    "check_model": "analyses.inspection",
    "implement": "dna",
    "DnaParameters": "dna",
}

__all__ = sorted(_HOME)


__getattr__, __dir__ = lazy_exports(__name__, _HOME)


class _Package(types.ModuleType):
    """``crn`` itself: an old flat module path imported by name (``import crn.simulate``)
    must not replace the exported function of the same name.
    """

    def __setattr__(self, name, value):
        if name in _HOME and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
