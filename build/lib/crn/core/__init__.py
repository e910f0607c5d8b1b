"""The core: expressions, protocols, networks, translation, models, outcomes, units, statistics.

Every public name of the layer's modules is importable from here; a module is
imported only when one of its names is first used, so importing the layer is free.
"""

from importlib import import_module

#: Public name -> module of this layer that defines it.
_HOME = {
    "consensus_index": "consensus",
    "mean_field_consensus_index": "consensus",
    "conservation_laws": "equations",
    "exact_number": "equations",
    "format_equations": "equations",
    "mean_field_equations": "equations",
    "species_symbols": "equations",
    "CRNError": "errors",
    "ExpressionError": "errors",
    "ModelError": "errors",
    "WorkerError": "errors",
    "FUNCTIONS": "expr",
    "evaluate": "expr",
    "names_in": "expr",
    "DEFAULT_MAX_STATES": "generate",
    "protocol_from_rule": "generate",
    "state_name": "generate",
    "LOADINGS": "loading",
    "LoadingGrid": "loading",
    "draw_droplets": "loading",
    "droplet_network": "loading",
    "loading_grid": "loading",
    "poisson_means": "loading",
    "reversal_probability": "loading",
    "split_decisions": "loading",
    "Model": "model",
    "ModelWarning": "model",
    "Rule": "model",
    "parse_model": "model",
    "parse_overrides": "model",
    "parse_reaction": "model",
    "parse_rule": "model",
    "IGNORED": "network",
    "MAX_COUNT": "network",
    "MAX_MULTIPLICITY": "network",
    "NO_CONSENSUS": "network",
    "Network": "network",
    "Reaction": "network",
    "deterministic_rates": "network",
    "format_side": "network",
    "propensities": "network",
    "RunOutcome": "outcome",
    "TIE": "outcome",
    "correct_label": "outcome",
    "label_name": "outcome",
    "tally": "outcome",
    "Outcome": "protocol",
    "PROBABILITY_SLACK": "protocol",
    "Protocol": "protocol",
    "is_identifier": "protocol",
    "time_summary": "stats",
    "wilson_interval": "stats",
    "network_to_protocol": "translate",
    "protocol_to_network": "translate",
    "AVOGADRO": "units",
    "CONCENTRATION_UNITS": "units",
    "RATE_UNITS_HELP": "units",
    "TIME_UNITS": "units",
    "VOLUME_UNITS": "units",
    "WET_LAB_CAUTION": "units",
    "concentration_for": "units",
    "copies": "units",
    "format_concentration": "units",
    "format_rate_constant": "units",
    "format_time": "units",
    "format_volume": "units",
    "parse_concentration": "units",
    "parse_rate_constant": "units",
    "parse_time": "units",
    "parse_volume": "units",
    "seconds_per_parallel_time": "units",
    "to_parallel_time": "units",
    "to_seconds": "units",
    "volume_for": "units",
}

__all__ = sorted(_HOME)


def __getattr__(name):
    home = _HOME.get(name)
    if home is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(f".{home}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
