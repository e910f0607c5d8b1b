"""The solvers.

Mean-field ODE, fixed points, configurations, exact chains, stochastic ensembles, time courses.

Every public name of the layer's modules is importable from here; a module is
imported only when one of its names is first used, so importing the layer is free.
"""


from crn._lazy import lazy_exports

#: Public name -> module of this layer that defines it.
_HOME = {
    "DEFAULT_MAX_STATES": "configurations",
    "StateSpace": "configurations",
    "consensus_labels": "configurations",
    "conservation_weights": "configurations",
    "enumerate_configurations": "configurations",
    "estimate_configurations": "configurations",
    "estimate_memory": "configurations",
    "factor_entries_per_row": "configurations",
    "lattice_dimension": "configurations",
    "DISSECTION_MIN": "exact",
    "DissectionPlan": "multifrontal",
    "LatticeFactor": "multifrontal",
    "factorize": "multifrontal",
    "plan": "multifrontal",
    "DIRECT_LIMIT": "exact",
    "ExactResult": "exact",
    "exact_outcomes": "exact",
    "stable_consensus": "exact",
    "transient_outcomes": "exact",
    "CLASSIFICATIONS": "fixed_points",
    "EXACT_MAX_SPECIES": "fixed_points",
    "FixedPoint": "fixed_points",
    "classify": "fixed_points",
    "conservation_basis": "fixed_points",
    "find_fixed_points": "fixed_points",
    "restricted_eigenvalues": "fixed_points",
    "METHODS": "ode",
    "MeanFieldResult": "ode",
    "MeanFieldSystem": "ode",
    "default_horizon": "ode",
    "initial_state": "ode",
    "mean_field_jacobian": "ode",
    "mean_field_rhs": "ode",
    "mean_field_system": "ode",
    "molecules_per_unit": "ode",
    "solve_mean_field": "ode",
    "AUTO_BATCHED_FROM": "simulate",
    "ENGINES": "simulate",
    "Ensemble": "simulate",
    "SimulationInterrupted": "simulate",
    "choose_engine": "simulate",
    "probe_scheduler": "simulate",
    "run_chunk": "simulate",
    "MAX_SAMPLES": "time_course",
    "QUANTILE_MEMORY": "time_course",
    "TimeCourse": "time_course",
    "TimeCourseAccumulator": "time_course",
    "quantile_rank_error": "time_course",
    "reduction_memory": "time_course",
    "sample_times": "time_course",
    "time_course_of_counts": "time_course",
}

__all__ = sorted(_HOME)


__getattr__, __dir__ = lazy_exports(__name__, _HOME)
