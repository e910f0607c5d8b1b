"""The options and the running of ensembles shared by ``crn ssa`` and ``crn compare``."""

from __future__ import annotations

from typing import TYPE_CHECKING

import click

from crn.commands.options import (
    CLUSTER_ADDRESS,
    guard,
    guard_options,
    progress_bar,
    seed_notice,
)
from crn.engines import ENGINES

if TYPE_CHECKING:
    from crn.solvers.simulate import Ensemble

__all__ = ["ensemble_options", "run_ensemble", "ensemble_summary", "format_ensemble",
           "horizon_text", "finish_interrupted", "number_text"]


def ensemble_options(func):
    """The options shared by commands that run an ensemble."""
    options = [
        click.option("--runs", type=click.IntRange(min=1), default=100, show_default=True,
                     help="Number of stochastic runs."),
        click.option("--until", type=click.FloatRange(min=0, min_open=True), default=None,
                     help="Horizon in parallel time (network time for networks); default "
                          "20 (1 + ln n) for protocols."),
        click.option("--engine", type=click.Choice(["auto", *ENGINES]), default="auto",
                     show_default=True, help="Stochastic engine."),
        click.option("--workers", type=click.IntRange(min=1), default=None,
                     help="Local worker processes (default: all cores)."),
        click.option("--cluster", type=CLUSTER_ADDRESS, metavar="ADDRESS", default=None,
                     help="Dask scheduler address (tcp://HOST:PORT) to run the ensemble on."),
    ]
    for option in reversed(options):
        func = option(func)
    return guard_options(func)


def run_ensemble(net, *, runs, until, engine, seed, workers, cluster, as_json, times=None,
                 description="stochastic runs", reduce=None, max_memory=None, force=False):
    """Run :func:`crn.solvers.simulate.simulate` under a progress bar; report the seed and Ctrl-C.

    First the work is estimated from the engine's cost model
    (:func:`crn.runtime.guards.ensemble_estimate`): printed when long, refused (exit 2)
    beyond the limits unless ``force``.

    Returns
    -------
    (Ensemble, bool)
        The ensemble (the finished runs after Ctrl-C or SIGTERM) and whether it
        was interrupted. With ``reduce`` (see :func:`crn.solvers.simulate.simulate`)
        every run's counts go to it.

    Raises
    ------
    WorkerError
        When worker processes kept dying; ``partial`` holds the finished runs.
    """
    import os

    from crn.runtime.guards import ensemble_estimate
    from crn.solvers.simulate import SimulationInterrupted, choose_engine, default_horizon, simulate

    horizon = default_horizon(net) if until is None else float(until)
    estimate = ensemble_estimate(net, runs=runs, until=horizon, engine=choose_engine(net, engine),
                                 workers=workers or os.cpu_count() or 1,
                                 n_times=101 if times is None else len(times))
    if reduce is not None:  # the runs' counts are reduced as they come: bounded memory
        from dataclasses import replace

        from crn.solvers.time_course import reduction_memory

        estimate = replace(estimate, memory=float(reduction_memory(
            len(times), net.n_species, runs)))
    guard(estimate, max_memory, force, announce=not as_json)

    from crn.runtime.seeds import root_seed

    root = root_seed(seed)
    if seed is None:
        seed_notice(root.entropy)
    with progress_bar(description, runs, enabled=not as_json) as update:
        try:
            ensemble = simulate(net, runs=runs, until=until, times=times, engine=engine,
                                rng=root, workers=workers, cluster=cluster, progress=update,
                                reduce=reduce)
        except SimulationInterrupted as stop:
            return stop.ensemble, True
    return ensemble, False


def ensemble_summary(ensemble: Ensemble, model_name: str) -> dict:
    """The ``crn ssa`` JSON object: the model's name and :meth:`Ensemble.summary`."""
    return {"model": model_name, **ensemble.summary()}


def horizon_text(until: float, net) -> str:
    """``"158.2 parallel time"`` for a protocol, ``"5 time units"`` for a network."""
    return f"{until:.4g} {'parallel time' if net.from_protocol else 'time units'}"


def number_text(x) -> str:
    """``"-"`` for None, else four significant digits."""
    return "-" if x is None else f"{x:.4g}"


def format_ensemble(ensemble: Ensemble, correct=None) -> list[str]:
    """Table lines: each label's runs and probability with its 95% Wilson interval
    (:meth:`Ensemble.outcome_intervals`), then the consensus-time quantiles."""
    if ensemble.runs == 0:
        return ["no run finished"]
    lines = [f"{'label':<10} {'runs':>7} {'probability':>12}   95% interval"]
    intervals = ensemble.outcome_intervals()
    for label, row in sorted(intervals.items(), key=lambda kv: (kv[0] == "none", -kv[1]["runs"])):
        mark = "  (correct)" if correct is not None and label == correct else ""
        lines.append(f"{label:<10} {row['runs']:>7} {row['p']:>12.4f}   "
                     f"[{row['low']:.4f}, {row['high']:.4f}]{mark}")
    summary = ensemble.consensus_time_summary()
    if summary is None:
        lines.append("consensus time: no run reached consensus")
    else:
        lines.append("consensus time: mean {}  median {}  5% {}  95% {}".format(
            *(number_text(summary[k]) for k in ("mean", "median", "q05", "q95"))))
    return lines


def finish_interrupted(ensemble: Ensemble):
    """After Ctrl-C or SIGTERM: say how many runs finished; exit with the interruption's status."""
    from crn.runtime import interrupts

    click.echo(f"crn: {interrupts.reason()} after {ensemble.runs} of {ensemble.requested} runs",
               err=True)
    click.get_current_context().exit(interrupts.exit_status())
