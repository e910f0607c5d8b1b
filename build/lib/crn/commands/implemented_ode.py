"""``crn ode --implement``: the mean field of the DNA implementation beside the formal one."""

from __future__ import annotations

from types import SimpleNamespace

import click
import numpy as np

from crn.commands.implementing import format_fuel, implement_network, implementation_json
from crn.commands.options import emit_json

__all__ = ["run_implemented_ode", "signal_fractions", "consensus_json", "fuel_answer_json"]


def signal_fractions(impl, result) -> dict[str, np.ndarray]:
    """Each signal species as a fraction of the formal population (or total), over time.

    The implementation is solved in concentrations (molecules / volume); its
    signals are rescaled to molecules / the formal network's molecules per
    unit, the unit of the formal solve, so the two compare directly.
    """
    from crn.solvers.ode import molecules_per_unit

    scale = float(result.molecules_per_unit) / molecules_per_unit(impl.formal)
    index = impl.network.index
    return {s: np.asarray(result.values[:, index[s]]) * scale for s in impl.formal.species}


def held_fractions(impl, result) -> dict[str, np.ndarray]:
    """Each formal species free plus held in gates, in the unit of :func:`signal_fractions`."""
    from crn.analyses.implemented import held_matrix
    from crn.solvers.ode import molecules_per_unit

    scale = float(result.molecules_per_unit) / molecules_per_unit(impl.formal)
    totals = np.asarray(result.values) @ held_matrix(impl) * scale
    return {s: totals[:, i] for i, s in enumerate(impl.formal.species)}


def consensus_json(outcome) -> dict | None:
    """``{label, time}`` of a mean-field outcome, None without consensus."""
    return None if outcome.label is None else {"label": outcome.label, "time": outcome.time}


def fuel_answer_json(answer) -> dict:
    """The JSON object of a :class:`crn.analyses.design_questions.FuelAnswer`."""
    return {"excess": answer.excess, "fuel_molar": answer.fuel_molar,
            "formal_time": answer.formal_time, "time": answer.time,
            "tolerance": answer.tolerance, "reason": answer.reason,
            "tried": [{"excess": e, "time": t} for e, t in answer.tried]}


def fuel_answer_text(answer, concentration: float) -> str:
    """One line answering "how much fuel excess for a decision within the tolerance"."""
    from crn.core.units import format_concentration

    if answer.reason == "formal undecided":
        return "fuel needed: the formal network reaches no consensus to compare with"
    if answer.excess is None:
        last = answer.tried[-1] if answer.tried else (None, None)
        at = "no decision" if last[1] is None else f"decision at {last[1]:.4g}"
        return (f"fuel needed: no excess up to {last[0]:g}x brings the decision within "
                f"{answer.tolerance:.0%} of the formal {answer.formal_time:.4g} ({at} there): "
                f"the first gate step sequesters signal (raise --max-rate or --toehold, or lower "
                f"--rate), or the leak grows with the fuel")
    return (f"fuel needed: {answer.excess:.3g}x the signal concentration "
            f"({format_concentration(answer.excess * concentration)}) decides at "
            f"{answer.time:.4g}, within {answer.tolerance:.0%} of the formal "
            f"{answer.formal_time:.4g}")


def run_implemented_ode(loaded, settings, *, until, times, method, plot_file, csv_file, as_json,
                        equations, latex, fuel_needed, within, every=None, in_counts=False,
                        force=False) -> None:
    """Solve the implementation's mean field and print or write it (the ``ode`` command)."""
    from crn.analyses.implemented import formal_ode_horizon, fuel_left_ode
    from crn.commands.ode import _print_equations, mean_field_json, sample_times
    from crn.solvers.ode import solve_mean_field

    formal = loaded.network
    impl = implement_network(formal, settings)
    if equations or latex:
        _print_equations(impl.network, latex, as_json)
        return
    times, until = sample_times(times, until, every, force, in_counts,
                                lambda: formal_ode_horizon(formal))
    horizon = until if until is not None else (
        float(times[-1]) if times is not None and times[-1] > 0 else formal_ode_horizon(formal))
    result = solve_mean_field(impl.network, until=horizon, times=times, method=method,
                              stop_at_consensus=times is None)
    formal_result = solve_mean_field(formal, until=horizon, method=method)
    fuel = fuel_left_ode(impl, result)
    answer = None
    if fuel_needed:
        from crn.analyses.design_questions import fuel_for_time

        scheme, params = settings
        answer = fuel_for_time(formal, scheme, params, tolerance=within)
    course = None
    if every is not None:
        from crn.solvers.time_course import TimeCourse

        course = TimeCourse.from_mean_field(result, counts=in_counts)
    if csv_file and course is not None:
        from crn.io.time_course import write_time_course_csv

        write_time_course_csv(csv_file, course)
    elif csv_file:
        from crn.io.ode_files import write_mean_field_csv

        write_mean_field_csv(csv_file, result)
    if plot_file:
        save_implementation_plot(plot_file, impl, formal_result, result, None,
                                 title=f"Mean-field ODE of {loaded.name}: formal vs "
                                       f"{impl.scheme} implementation")
    if as_json:
        obj = mean_field_json(SimpleNamespace(name=loaded.name, network=impl.network), result,
                              None)
        obj.update(fuel=fuel, implementation=implementation_json(impl),
                   formal_consensus=consensus_json(formal_result.consensus),
                   signal_fractions=signal_fractions(impl, result),
                   held_fractions=held_fractions(impl, result))
        if answer is not None:
            obj["fuel_needed"] = fuel_answer_json(answer)
        if course is not None:
            obj["time_course"] = course.to_json()
        emit_json(obj)
        return
    click.echo(_text(loaded.name, impl, result, formal_result, fuel, answer))


def _outcome_text(outcome, end) -> str:
    if outcome.label is None:
        return f"none by t = {end:.6g}"
    return f"{outcome.label} at t = {outcome.time:.6g}"


def _text(name, impl, result, formal_result, fuel, answer) -> str:
    p = impl.params
    from crn.core.units import format_concentration, format_rate_constant

    end = float(result.times[-1]) if result.times.size else 0.0
    lines = [f"{name}: mean-field ODE of its {impl.scheme} DNA implementation "
             f"({impl.network.n_species} species, {impl.network.n_reactions} reactions; "
             f"rate {format_rate_constant(p.rate)}, "
             f"signals {format_concentration(p.concentration)}, "
             f"fuel {format_concentration(p.fuel_molar)}, q_max {format_rate_constant(p.q_max)}, "
             f"leak {p.leak:g} /M/s)",
             "times in the formal network's unit "
             f"(1 = {p.seconds_per_time_unit:.4g} s)",
             f"consensus    implementation {_outcome_text(result.consensus, end)}; formal "
             f"{_outcome_text(formal_result.consensus, float(formal_result.times[-1]))}"]
    if result.status < 0:
        lines.append(f"solver       failed: {result.message}")
    lines.append(f"signals at t = {end:.6g} (fraction of the formal population): free, and "
                 f"free plus held in gates")
    shares = signal_fractions(impl, result)
    held = held_fractions(impl, result)
    width = max(len(s) for s in shares)
    for s, v in shares.items():
        last = float(v[-1]) if v.size else 0.0
        total = float(held[s][-1]) if held[s].size else 0.0
        lines.append(f"  {s:<{width}}  {last:.6g}  {total:.6g}")
    lines.append(format_fuel(fuel))
    if answer is not None:
        lines.append(fuel_answer_text(answer, p.concentration))
    return "\n".join(lines)


def save_implementation_plot(path, impl, formal_result, result, ensemble, *, title,
                             disagreement=None):
    """Write the formal ODE / implementation ODE (/ implementation runs) figure."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.io.atomic import save_figure
    from crn.plots.implementation import plot_implementation

    ax = plot_implementation(impl, formal_result, result, ensemble, title=title,
                             disagreement=disagreement)
    try:
        save_figure(path, ax.figure, dpi=120)
    finally:
        plt.close(ax.figure)
