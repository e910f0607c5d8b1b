"""crn: population protocols as reaction networks; mean field and exact stochastics side by side.

The names below are loaded on first use, so ``import crn`` (and the command
line's start-up) costs no numpy, scipy or numba import.
"""

from importlib import import_module

__all__ = [
    "CRNError",
    "ExpressionError",
    "Model",
    "ModelError",
    "Network",
    "Outcome",
    "Protocol",
    "Reaction",
    "deterministic_rates",
    "network_to_protocol",
    "parse_model",
    "propensities",
    "protocol_to_network",
]

__version__ = "0.1.0"

_HOME = {
    "CRNError": "errors",
    "ExpressionError": "errors",
    "ModelError": "errors",
    "Model": "model",
    "parse_model": "model",
    "Network": "network",
    "Reaction": "network",
    "deterministic_rates": "network",
    "propensities": "network",
    "Outcome": "protocol",
    "Protocol": "protocol",
    "network_to_protocol": "translate",
    "protocol_to_network": "translate",
}


def __getattr__(name):
    home = _HOME.get(name)
    if home is None:
        raise AttributeError(f"module 'crn' has no attribute {name!r}")
    value = getattr(import_module(f".{home}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
