"""Stochastic engines: each returns :class:`~crn.engines.base.Trajectory` objects."""

__all__ = ["ENGINES"]

#: Engine name -> (module, function) running one trajectory; imported only when used.
ENGINES = {
    "direct": ("crn.engines.direct", "run_direct"),
    "batched": ("crn.engines.batched", "run_batched"),
    "reference": ("crn.reference", "run_reference"),
}
