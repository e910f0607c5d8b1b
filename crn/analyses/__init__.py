"""The analyses built on the solvers.

Regime cells and maps, the mean field beside the runs, copy numbers, verification,
inspection, DNA implementations.

Every public name of the layer's modules is importable from here; a module is
imported only when one of its names is first used, so importing the layer is free.
"""

from importlib import import_module

#: Public name -> module of this layer that defines it.
_HOME = {
    "cell_networks": "cells",
    "SAMPLES": "compare",
    "WINDOW_FACTOR": "compare",
    "Comparison": "compare",
    "MeanFieldWindow": "compare",
    "compare_network": "compare",
    "compare_runs": "compare",
    "compare_window": "compare",
    "disagreement": "compare",
    "mean_field_window": "compare",
    "CopiesResult": "copies",
    "Lattice": "copies",
    "Probe": "copies",
    "Prober": "copies",
    "lattice": "copies",
    "p_wrong_summary": "copies",
    "parallel_deadline": "copies",
    "physical_answer": "copies",
    "physical_outputs": "copies",
    "risk_parts": "copies",
    "smallest_n": "copies",
    "FuelAnswer": "design_questions",
    "ImplementationCopies": "design_questions",
    "LeakAnswer": "design_questions",
    "LoadedCells": "design_questions",
    "fuel_for_time": "design_questions",
    "implementation_copies": "design_questions",
    "leak_tolerance": "design_questions",
    "leak_tolerances": "design_questions",
    "risk_floor": "design_questions",
    "runs_for_risk": "design_questions",
    "Diagnosis": "implemented",
    "FUEL_OUT": "implemented",
    "ImplementedCells": "implemented",
    "decision_network": "implemented",
    "diagnose": "implemented",
    "formal_horizon": "implemented",
    "fuel_left_ode": "implemented",
    "fuel_left_runs": "implemented",
    "held_labels": "implemented",
    "held_matrix": "implemented",
    "implementation_of": "implemented",
    "CheckReport": "inspection",
    "RuleReport": "inspection",
    "check_model": "inspection",
    "reachable_species": "inspection",
    "FIRST_ROUND": "probes",
    "GAP_FRACTION_RANGE": "probes",
    "InitialSplit": "probes",
    "ModelParameters": "probes",
    "SequentialEstimate": "probes",
    "cantelli_tail": "probes",
    "cell_seed": "probes",
    "configurations": "probes",
    "exact_absorption": "probes",
    "exact_decision": "probes",
    "gap_for_fraction": "probes",
    "late_consensus_bound": "probes",
    "look_levels": "probes",
    "look_schedule": "probes",
    "ode_decision": "probes",
    "sample_until_decided": "probes",
    "sided_interval": "probes",
    "simultaneous_interval": "probes",
    "split_counts": "probes",
    "stochastic_decisions": "probes",
    "BATCHED_FROM": "regimes",
    "Boundary": "regimes",
    "DEFAULT_EXACT_MAX": "regimes",
    "FLAGS": "regimes",
    "MIN_BRACKETED": "regimes",
    "RegimeCell": "regimes",
    "RegimeMap": "regimes",
    "TIME_FLAGS": "regimes",
    "evaluate_cell": "regimes",
    "fit_boundary": "regimes",
    "merged_fractions": "regimes",
    "plan_cells": "regimes",
    "regime_map": "regimes",
    "risk_flag": "regimes",
    "time_flag": "regimes",
    "VerifyResult": "verify",
    "bottom_components": "verify",
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
