"""Stochastic engines: each returns :class:`~crn.engines.base.Trajectory` objects."""
