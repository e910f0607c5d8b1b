"""``crn ssa``: an ensemble of exact stochastic runs; who won, how often, and when."""

from __future__ import annotations

import click

from crn.commands.ensembles import (
    ensemble_options,
    ensemble_summary,
    finish_interrupted,
    format_ensemble,
    horizon_text,
    number_text,
    run_ensemble,
)
from crn.commands.implementing import dna_settings, implementation_options
from crn.commands.options import (
    FIGURE_FILE,
    OUTPUT_FILE,
    emit_json,
    every_option,
    json_option,
    load,
    model_argument,
    sample_times_option_value,
    seed_notice,
    seed_option,
    set_option,
)

__all__ = ["ssa", "format_horizon"]


def _write_csv(path, ensemble, course, interrupted: bool) -> None:
    """The time course in long form when there is one, else one row per run."""
    if course is not None:
        from crn.io.time_course import write_time_course_csv

        write_time_course_csv(path, course)
    else:
        from crn.io.runs import write_runs_csv

        write_runs_csv(ensemble, path, note="interrupted" if interrupted else None)


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
@implementation_options
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
    from crn.core.errors import WorkerError
    from crn.core.outcome import correct_label
    from crn.io.runs import write_runs_csv
    from crn.runtime.seeds import root_seed, seed_entropy
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
            seed = seed_entropy(None)
            seed_notice(seed)
        accumulator = TimeCourseAccumulator(times, net.species, runs,
                                            rng=root_seed(seed),
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
        _write_csv(csv_path, ensemble, course if accumulator is not None else None, interrupted)
    if plot_path is not None and course is not None:
        _plot(net, course, loaded.name, plot_path)
    fuel_left = None
    if impl is not None:
        from crn.analyses.implemented import fuel_left_at_horizon

        fuel_left = fuel_left_at_horizon(impl, ensemble, course)
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
        finish_interrupted(ensemble)


def format_horizon(course) -> list[str]:
    """Table lines: each species' mean, sd and 5%/95% quantiles at the last sample time."""
    import math

    def cell(values, i):
        value = None if values is None else float(values[-1, i])
        return number_text(value if value is not None and math.isfinite(value) else None)

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
    from crn.plots.save import save_figure, use_file_backend

    use_file_backend()
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
    save_figure(ax.figure, path)
