"""``crn ssa``: an ensemble of exact stochastic runs; who won, how often, and when."""

from __future__ import annotations

from typing import TYPE_CHECKING

import click

from crn.commands.implementing import dna_options, dna_settings, implement_option
from crn.commands.options import (
    CLUSTER_ADDRESS,
    FIGURE_FILE,
    OUTPUT_FILE,
    emit_json,
    every_option,
    guard,
    guard_options,
    json_option,
    load,
    model_argument,
    progress_bar,
    sample_times_option_value,
    seed_notice,
    seed_option,
    set_option,
)
from crn.engines import ENGINES

if TYPE_CHECKING:
    from crn.solvers.simulate import Ensemble

__all__ = ["ssa", "ensemble_options", "run_ensemble", "ensemble_summary", "format_ensemble",
           "horizon_text", "format_horizon"]


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

    import numpy as np

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

    root = np.random.SeedSequence(seed)
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


def horizon_text(until: float, net) -> str:
    """``"158.2 parallel time"`` for a protocol, ``"5 time units"`` for a network."""
    return f"{until:.4g} {'parallel time' if net.from_protocol else 'time units'}"


def _number(x) -> str:
    return "-" if x is None else f"{x:.4g}"


def format_ensemble(ensemble: Ensemble, correct=None) -> list[str]:
    """Table lines: each label's runs and probability with its 95% Wilson interval, then the
    consensus-time quantiles."""
    from crn.core.stats import wilson_interval

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
    from crn.runtime import interrupts

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
              help="Also write one row per run to this CSV file (with --every: the time "
                   "course in long form, one row per time and species; after an "
                   "interruption the finished runs under a '# partial' first line).")
@every_option
@click.option("--plot", "plot_path", type=FIGURE_FILE, default=None, metavar="FILE",
              help="Save a figure of each species' mean count and 5-95% band with the "
                   "mean-field ODE overlaid (png, pdf, svg, ...).")
@implement_option
@dna_options
def ssa(model, sets, runs, until, engine, workers, cluster, max_memory, force, seed, as_json,
        csv_path, every, plot_path, implement, fuel, max_rate, toehold, leak, rate,
        concentration):
    """Run MODEL's exact stochastic dynamics RUNS times and report who won and when.

    Each run has its own random stream from --seed, so the numbers do not depend
    on --workers or --cluster. Ctrl-C stops and reports the runs finished. With
    --every DT the runs go on to --until and the species' counts are summarised
    at 0, DT, 2 DT, ..., --until (a model with no output labels reports the
    species at the horizon anyway). The work is estimated first and refused
    beyond a day (or --max-memory) unless --force. With --implement the runs are
    of the DNA implementation (same time unit, default horizon of the formal
    network), and the fuel left at the horizon is reported.
    """
    import numpy as np

    from crn.core.errors import WorkerError
    from crn.core.outcome import correct_label
    from crn.io.runs import write_runs_csv
    from crn.solvers.simulate import default_horizon
    from crn.solvers.time_course import TimeCourseAccumulator, time_course_of_counts

    settings = dna_settings(implement, fuel=fuel, max_rate=max_rate, toehold=toehold,
                            leak=leak, rate=rate, concentration=concentration)
    loaded = load(model, sets)
    net = loaded.network
    impl = None
    if settings is not None:
        from crn.analyses.implemented import formal_horizon
        from crn.commands.implementing import implement_network

        impl = implement_network(net, settings)
        until = formal_horizon(net) if until is None else until
        net = impl.network
    time_units = "parallel time" if loaded.network.from_protocol else "network time"
    times = accumulator = None
    if every is not None:
        horizon = default_horizon(net) if until is None else until
        times = sample_times_option_value(every, horizon, force)
        until = float(times[-1])
        if seed is None:  # the kept runs are drawn from the root seed, so fix it now
            seed = int(np.random.SeedSequence().entropy)
            seed_notice(seed)
        accumulator = TimeCourseAccumulator(times, net.species, runs,
                                            rng=np.random.SeedSequence(seed),
                                            time_units=time_units)
    try:
        ensemble, interrupted = run_ensemble(net, runs=runs, until=until, engine=engine,
                                             seed=seed, workers=workers, cluster=cluster,
                                             as_json=as_json, times=times, reduce=accumulator,
                                             max_memory=max_memory, force=force)
    except WorkerError as err:
        if (csv_path is not None and accumulator is None and err.partial is not None
                and err.partial.runs):
            write_runs_csv(err.partial, csv_path, note="worker processes died")
        raise
    course = None
    if accumulator is not None:
        course = accumulator.result()
    elif (plot_path is not None or not net.labels) and ensemble.runs:
        course = time_course_of_counts(ensemble.times, ensemble.counts, net.species,
                                       time_units=time_units)
    if csv_path is not None and ensemble.runs:
        if accumulator is not None:
            from crn.io.time_course import write_time_course_csv

            write_time_course_csv(csv_path, course)
        else:
            write_runs_csv(ensemble, csv_path, note="interrupted" if interrupted else None)
    if plot_path is not None and course is not None:
        _plot(net, course, loaded.name, plot_path)
    fuel_left = None
    if impl is not None:
        from crn.analyses.implemented import fuel_left_runs

        fuel_left = fuel_left_runs(impl, ensemble)
        if not fuel_left and course is not None:
            last = course.mean[-1]
            fuel_left = impl.fuel_remaining(last)
    if as_json:
        summary = ensemble_summary(ensemble, loaded.name)
        if course is not None and every is not None:
            summary["time_course"] = course.to_json()
        if course is not None and not net.labels:
            summary["at_horizon"] = course.at(-1)
        if impl is not None:
            from crn.commands.implementing import implementation_json

            summary.update(fuel=fuel_left, implementation=implementation_json(impl))
        emit_json(summary)
    else:
        head = (f"{loaded.name}: {ensemble.runs} runs, engine {ensemble.engine}, "
                f"horizon {horizon_text(ensemble.until, net)}")
        if impl is not None:
            head += (f" (formal time unit), on its {impl.scheme} DNA implementation "
                     f"({net.n_species} species)")
        lines = [head]
        if net.labels or ensemble.runs == 0:
            lines.extend(format_ensemble(ensemble, correct_label(net)))
        if course is not None:
            lines.extend(format_horizon(course))
        if impl is not None:
            from crn.commands.implementing import format_fuel

            lines.append(format_fuel(fuel_left) + " (mean over runs, at the horizon)")
        click.echo("\n".join(lines))
    if interrupted:
        _finish_interrupted(ensemble)


def format_horizon(course) -> list[str]:
    """Table lines: each species' mean, sd and 5%/95% quantiles at the last sample time."""
    import math

    def cell(values, i):
        value = None if values is None else float(values[-1, i])
        return _number(value if value is not None and math.isfinite(value) else None)

    width = max([7, *(len(s) for s in course.species)])
    lines = [f"species at t = {course.times[-1]:.4g} (counts over {course.runs} runs):",
             f"  {'species':<{width}} {'mean':>10} {'sd':>10} {'5%':>10} {'95%':>10}"]
    for i, name in enumerate(course.species):
        lines.append(f"  {name:<{width}} " + " ".join(
            f"{cell(getattr(course, k), i):>10}" for k in ("mean", "sd", "q05", "q95")))
    if course.quantile_runs < course.runs:
        from crn.solvers.time_course import quantile_rank_error

        eps = quantile_rank_error(course.quantile_runs)
        lines.append(f"  quantiles from {course.quantile_runs} runs drawn at random "
                     f"(within {100 * eps:.1f} percentage points of rank, 95% confidence)")
    return lines


def _plot(net, course, name: str, path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.io.atomic import save_figure
    from crn.plots.time_course import plot_time_course
    from crn.solvers.ode import molecules_per_unit, solve_mean_field
    from crn.solvers.time_course import TimeCourse

    result = solve_mean_field(net, times=course.times, until=float(course.times[-1]),
                              stop_at_consensus=False)
    ode = TimeCourse.from_mean_field(result, counts=True)
    per_unit = molecules_per_unit(net)
    unit_name = ("fraction of the population" if net.from_protocol
                 else f"concentration (molecules / volume {net.volume:g})")
    ax = plot_time_course(course, ode=ode, per_unit=per_unit, unit_name=unit_name,
                          title=f"{name}\n{course.runs} stochastic runs (mean, 5-95% band); "
                                "mean-field ODE dashed")
    try:
        save_figure(path, ax.figure)
    finally:
        plt.close(ax.figure)
