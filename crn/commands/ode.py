"""``crn ode``: the mean-field ODE of a model, its consensus, fixed points and equations."""

from __future__ import annotations

import math

import click

from crn.commands.implementing import dna_settings, implementation_options
from crn.commands.options import (
    FIGURE_FILE,
    OUTPUT_FILE,
    emit_json,
    every_option,
    force_option,
    json_option,
    lab_time_options,
    load,
    model_argument,
    sample_times_option_value,
    seconds_per_time,
    set_option,
)
from crn.io.ode_files import mean_field_json

__all__ = ["mean_field_json", "ode"]

#: The integrators of scipy's ``solve_ivp`` offered by ``--method``; the same as
#: :data:`crn.solvers.ode.METHODS` (kept here so that ``crn --help`` needs no scipy).
METHODS = ("LSODA", "BDF", "Radau", "RK45", "DOP853")


def _parse_times(text: str | None):
    if text is None:
        return None
    try:
        times = [float(part) for part in text.split(",") if part.strip()]
    except ValueError as err:
        raise click.BadParameter(f"expected numbers separated by commas, got {text!r}",
                                 param_hint="--at") from err
    if not times or any(not math.isfinite(t) or t < 0 for t in times):
        raise click.BadParameter(f"times must be finite and >= 0, got {text!r}",
                                 param_hint="--at")
    import numpy as np

    return np.unique(np.asarray(times, dtype=np.float64))


def _format_point(point, species) -> str:
    if point.exact is not None:
        return ", ".join(f"{s}={point.exact[s]}" for s in species)
    return ", ".join(f"{s}={v:.6g}" for s, v in zip(species, point.point, strict=True))


def _format_continuum(point, species) -> str:
    from crn.io.ode_files import free_species

    free = free_species(point, species)
    fixed = [s for s in species if s not in free]
    if point.exact is not None:
        where = ", ".join(f"{s}={point.exact[s]}" for s in fixed)
    else:
        where = ", ".join(f"{s}={v:.6g}" for s, v in zip(species, point.point, strict=True)
                          if s in fixed)
    what = "a continuum of fixed points, one for every value of " + " and ".join(free)
    return (f"{where + ': ' if where else ''}{what}; not isolated, so the eigenvalues say "
            "nothing about stability")


def _format_eigenvalues(values) -> str:
    parts = []
    for z in values:
        z = complex(z)
        parts.append(f"{z.real:.6g}" if abs(z.imag) <= 1e-12 * max(1, abs(z))
                     else f"{z.real:.6g}{z.imag:+.6g}i")
    return ", ".join(parts) if parts else "none (the conserved class is this one point)"


@click.command("ode")
@model_argument
@set_option
@click.option("--until", type=click.FloatRange(min=0, min_open=True), default=None,
              metavar="T", help="Horizon (parallel time for protocols). Default: run until "
                                "consensus, capped at a multiple of the natural time scale.")
@click.option("--at", "at", default=None, metavar="t1,t2,...",
              help="Report the solution at these times (the solve then runs past consensus).")
@click.option("--plot", "plot_path", type=FIGURE_FILE, default=None,
              metavar="FILE", help="Save a figure of the fractions against time (png, pdf, "
                                   "svg, ...).")
@click.option("--csv", "csv_path", type=OUTPUT_FILE, default=None,
              metavar="FILE", help="Write the trajectory as CSV (time, then one column per "
                                   "species).")
@json_option
@click.option("--equations", is_flag=True, help="Print the ODE system instead of solving it.")
@click.option("--latex", is_flag=True, help="Print the ODE system as LaTeX instead of solving it.")
@click.option("--method", type=click.Choice(METHODS), default="LSODA", show_default=True,
              help="Integrator of scipy's solve_ivp (BDF or Radau for stiff networks).")
@click.option("--fixed-points/--no-fixed-points", "with_fixed_points", default=True,
              show_default=True, help="Find the fixed points on the conserved simplex.")
@every_option
@click.option("--counts", "in_counts", is_flag=True,
              help="With --every: the time course in molecule counts (to overlay `crn ssa "
                   "--every`) instead of fractions or concentrations.")
@force_option
@lab_time_options
@implementation_options
@click.option("--fuel-needed", "fuel_needed", is_flag=True,
              help="With --implement: find the smallest fuel excess at which the "
                   "implementation decides within --within of the formal decision time.")
@click.option("--within", type=click.FloatRange(0, 1, min_open=True, max_open=True),
              default=0.1, show_default=True,
              help="Relative tolerance of --fuel-needed.")
def ode(model, sets, until, at, plot_path, csv_path, as_json, equations, latex, method,
        with_fixed_points, every, in_counts, force, implement, fuel, max_rate, toehold, leak,
        rate, concentration, fuel_needed, within):
    """Solve the mean-field ODE of MODEL: fractions of the population against parallel
    time for a protocol (n -> infinity), concentrations for a network. Reports the
    consensus (the agents not reporting the leading label make fewer than one
    molecule) and the fixed points with their stability. With --implement the ODE
    of the DNA implementation is solved instead, in the same time unit."""
    from crn.solvers.ode import solve_mean_field

    settings = dna_settings(implement, fuel=fuel, max_rate=max_rate, toehold=toehold,
                            leak=leak, rate=rate, concentration=concentration)
    if fuel_needed and settings is None:
        raise click.UsageError("--fuel-needed needs --implement SCHEME")
    loaded = load(model, sets)
    if settings is not None:
        from crn.commands.implemented_ode import run_implemented_ode

        run_implemented_ode(loaded, settings, until=until, times=_parse_times(at),
                            method=method, plot_path=plot_path, csv_path=csv_path,
                            as_json=as_json, equations=equations, latex=latex,
                            fuel_needed=fuel_needed, within=within, every=every,
                            in_counts=in_counts, force=force)
        return
    net = loaded.network
    seconds = seconds_per_time(net, rate, concentration)
    if equations or latex:
        _print_equations(net, latex, as_json)
        return
    from crn.solvers.ode import default_horizon

    times, until = sample_times(_parse_times(at), until, every, force, in_counts,
                                lambda: default_horizon(net))
    result = solve_mean_field(net, until=until, times=times, method=method,
                              stop_at_consensus=times is None)
    course = None
    if every is not None:
        from crn.solvers.time_course import TimeCourse

        course = TimeCourse.from_mean_field(result, counts=in_counts)
    points = None
    if with_fixed_points:
        from crn.solvers.fixed_points import find_fixed_points

        points = find_fixed_points(net)
    if csv_path and course is not None:
        from crn.io.time_course import write_time_course_csv

        write_time_course_csv(csv_path, course)
    elif csv_path:
        from crn.io.ode_files import write_mean_field_csv

        write_mean_field_csv(csv_path, result)
    if plot_path:
        _plot(result, loaded.name, plot_path, seconds)
    if as_json:
        obj = mean_field_json(loaded, result, points)
        if course is not None:
            obj["time_course"] = course.to_json()
        emit_json(obj)
        return
    text = _text(loaded, result, points, requested=at is not None)
    if course is not None:
        text += (f"\ntime course: {course.times.size} samples every {every:g} up to "
                 f"{course.times[-1]:.6g}, in {course.units} (--json or --csv to see it)")
    click.echo(text)


def sample_times(times, until, every, force, in_counts, horizon):
    """Check ``--at``/``--every``/``--counts`` together and give the sample times and horizon.

    Parameters
    ----------
    times : ndarray or None
        Parsed ``--at`` times.
    until : float or None
    every : float or None
    force : bool
    in_counts : bool
    horizon : callable () -> float
        The default horizon, used by ``--every`` without ``--until``.

    Returns
    -------
    (ndarray or None, float or None)
    """
    if times is not None and until is not None and times[-1] > until:
        raise click.BadParameter(f"time {times[-1]:g} is beyond --until {until:g}",
                                 param_hint="--at")
    if every is not None:
        if times is not None:
            raise click.BadParameter("give either --at or --every, not both",
                                     param_hint="--every")
        times = sample_times_option_value(every, horizon() if until is None else until, force)
        until = float(times[-1])
    elif in_counts:
        raise click.BadParameter("--counts applies to the time course of --every",
                                 param_hint="--counts")
    return times, until


def _print_equations(net, latex: bool, as_json: bool) -> None:
    from crn.core.equations import format_equations, mean_field_equations

    if as_json:
        import sympy

        obj = {"species": list(net.species),
               "units": "fraction" if net.from_protocol else "concentration",
               "equations": {s: sympy.sstr(e) for s, e in mean_field_equations(net).items()}}
        if latex:
            obj["latex"] = format_equations(net, latex=True)
        emit_json(obj)
        return
    click.echo(format_equations(net, latex=latex), nl=False)


def _plot(result, name: str, path, seconds=None) -> None:
    from crn.plots.save import save_figure, use_file_backend

    use_file_backend()
    from crn.plots.ode import plot_mean_field

    ax = plot_mean_field(result, title=f"{name}\nmean-field ODE", seconds_per_time=seconds)
    save_figure(ax.figure, path)


def _text(loaded, result, points, requested: bool = False) -> str:
    net = loaded.network
    unit = (f"fractions of n = {result.molecules_per_unit:g} agents, parallel time"
            if result.units == "fraction"
            else f"concentrations (molecules / {result.molecules_per_unit:g}), network time")
    outcome = result.consensus
    lines = [f"{loaded.name}: mean-field ODE in {unit} ({result.method})"]
    if outcome.label is None:
        lines.append(f"consensus    none by t = {result.times[-1]:.6g}")
    else:
        lines.append(f"consensus    {outcome.label} at t = {outcome.time:.6g}")
    if result.status < 0:
        lines.append(f"solver       failed: {result.message}")
    width = max(len(s) for s in net.species) if net.n_species else 0
    if requested:
        lines.extend(_table(result, net.species))
    else:
        t_end = result.times[-1] if result.times.size else 0.0
        lines.append(f"at t = {t_end:.6g}:")
        for s, v in result.final.items():
            lines.append(f"  {s:<{width}}  {v:.6g}")
    if points is not None:
        lines.append("fixed points on the conserved simplex:" if net.from_protocol
                     else "fixed points (with the initial state's conserved totals):")
        for p in points:
            tag = (f" (consensus {p.consensus})" if p.consensus else "") + (" (tie)" if p.tie
                                                                             else "")
            if p.classification == "non-isolated":
                lines.append(f"  {_format_continuum(p, net.species)}")
                continue
            lines.append(f"  {_format_point(p, net.species)}: {p.classification}{tag}; "
                         f"eigenvalues {_format_eigenvalues(p.eigenvalues)}")
    return "\n".join(lines)


def _table(result, species) -> list[str]:
    """One row per requested time, one column per species."""
    widths = [max(len(s), 11) for s in species]
    lines = ["at the requested times:",
             "  " + " ".join([f"{'t':>11}", *(f"{s:>{w}}" for s, w in zip(species, widths,
                                                                           strict=True))])]
    for t, row in zip(result.times, result.values, strict=True):
        lines.append("  " + " ".join([f"{t:>11.6g}", *(f"{v:>{w}.6g}" for v, w in
                                                        zip(row, widths, strict=True))]))
    return lines
