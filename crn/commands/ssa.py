"""``crn ssa``: an ensemble of exact stochastic runs; who won, how often, and when."""

from __future__ import annotations

import click

from ..simulate import ENGINES, Ensemble, SimulationInterrupted, simulate
from ..stats import wilson_interval
from .options import (
    OUTPUT_FILE,
    emit_json,
    guard,
    guard_options,
    json_option,
    load,
    model_argument,
    progress_bar,
    seed_option,
    set_option,
)

__all__ = ["ssa", "ensemble_options", "run_ensemble", "ensemble_summary", "format_ensemble"]


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
        click.option("--cluster", metavar="ADDRESS", default=None,
                     help="Dask scheduler address (tcp://HOST:PORT) to run the ensemble on."),
    ]
    for option in reversed(options):
        func = option(func)
    return guard_options(func)


def run_ensemble(net, *, runs, until, engine, seed, workers, cluster, as_json, times=None,
                 description="stochastic runs", max_memory=None, force=False):
    """Run :func:`crn.simulate.simulate` under a progress bar; report the seed and Ctrl-C.

    First the work is estimated from the engine's cost model
    (:func:`crn.guards.ensemble_estimate`): printed when long, refused (exit 2)
    beyond the limits unless ``force``.

    Returns
    -------
    (Ensemble, bool)
        The ensemble (the finished runs after Ctrl-C or SIGTERM) and whether it
        was interrupted.

    Raises
    ------
    WorkerError
        When worker processes kept dying; ``partial`` holds the finished runs.
    """
    import os

    import numpy as np

    from ..guards import ensemble_estimate
    from ..simulate import choose_engine, default_horizon

    horizon = default_horizon(net) if until is None else float(until)
    guard(ensemble_estimate(net, runs=runs, until=horizon, engine=choose_engine(net, engine),
                            workers=workers or os.cpu_count() or 1,
                            n_times=101 if times is None else len(times)), max_memory, force)
    root = np.random.SeedSequence(seed)
    if seed is None:
        click.echo(f"seed entropy {root.entropy} (pass --seed {root.entropy} to repeat)",
                   err=True)
    with progress_bar(description, runs, enabled=not as_json) as update:
        try:
            ensemble = simulate(net, runs=runs, until=until, times=times, engine=engine,
                                rng=root, workers=workers, cluster=cluster, progress=update)
        except SimulationInterrupted as stop:
            return stop.ensemble, True
    return ensemble, False


def ensemble_summary(ensemble: Ensemble, model_name: str) -> dict:
    """The ``crn ssa`` JSON object (contract keys ``runs``, ``outcomes``, ``consensus_time``)."""
    events = ensemble.events
    return {
        "model": model_name,
        "runs": ensemble.runs,
        "requested": ensemble.requested,
        "interrupted": not ensemble.complete,
        "engine": ensemble.engine,
        "seed_entropy": ensemble.seed_entropy,
        "until": ensemble.until,
        "outcomes": ensemble.outcomes(),
        "consensus_time": ensemble.consensus_time_summary(),
        "events_mean": float(events.mean()) if events.size and (events >= 0).all() else None,
    }


def _number(x) -> str:
    return "-" if x is None else f"{x:.4g}"


def format_ensemble(ensemble: Ensemble, correct=None) -> list[str]:
    """Table lines: each label's runs and probability with its 95% Wilson interval, then the
    consensus-time quantiles."""
    if ensemble.runs == 0:
        return ["no run finished"]
    lines = [f"{'label':<10} {'runs':>7} {'probability':>12}   95% interval"]
    outcomes = ensemble.outcomes()
    for label, k in sorted(outcomes.items(), key=lambda kv: (kv[0] == "none", -kv[1])):
        p, low, high = wilson_interval(k, ensemble.runs)
        mark = "  (correct)" if correct is not None and label == correct else ""
        lines.append(f"{label:<10} {k:>7} {p:>12.4f}   [{low:.4f}, {high:.4f}]{mark}")
    summary = ensemble.consensus_time_summary()
    if summary is None:
        lines.append("consensus time: no run reached consensus")
    else:
        lines.append("consensus time: mean {}  median {}  5% {}  95% {}".format(
            *(_number(summary[k]) for k in ("mean", "median", "q05", "q95"))))
    return lines


def _finish_interrupted(ensemble: Ensemble):
    from .. import interrupts

    click.echo(f"crn: {interrupts.reason()} after {ensemble.runs} of {ensemble.requested} runs",
               err=True)
    click.get_current_context().exit(interrupts.exit_status())


@click.command("ssa")
@model_argument
@set_option
@ensemble_options
@seed_option
@json_option
@click.option("--csv", "csv_path", type=OUTPUT_FILE, default=None,
              help="Also write one row per run to this CSV file (after an interruption, the "
                   "finished runs under a '# partial' first line).")
def ssa(model, sets, runs, until, engine, workers, cluster, max_memory, force, seed, as_json,
        csv_path):
    """Run MODEL's exact stochastic dynamics RUNS times and report who won and when.

    Each run has its own random stream from --seed, so the numbers do not depend
    on --workers or --cluster. Ctrl-C stops and reports the runs finished. The
    work is estimated first and refused beyond a day (or --max-memory) unless --force.
    """
    from ..errors import WorkerError
    from ..io.runs import write_runs_csv
    from ..outcome import correct_label

    loaded = load(model, sets)
    net = loaded.network
    try:
        ensemble, interrupted = run_ensemble(net, runs=runs, until=until, engine=engine,
                                             seed=seed, workers=workers, cluster=cluster,
                                             as_json=as_json, max_memory=max_memory,
                                             force=force)
    except WorkerError as err:
        if csv_path is not None and err.partial is not None and err.partial.runs:
            write_runs_csv(err.partial, csv_path, note="worker processes died")
        raise
    if csv_path is not None and ensemble.runs:
        write_runs_csv(ensemble, csv_path, note=None if not interrupted else "interrupted")
    if as_json:
        emit_json(ensemble_summary(ensemble, loaded.name))
    else:
        head = (f"{loaded.name}: {ensemble.runs} runs, engine {ensemble.engine}, "
                f"horizon {ensemble.until:.4g}")
        click.echo("\n".join([head, *format_ensemble(ensemble, correct_label(net))]))
    if interrupted:
        _finish_interrupted(ensemble)
