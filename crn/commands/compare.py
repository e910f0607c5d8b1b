"""``crn compare``: the mean-field ODE and the exact stochastic ensemble side by side."""

from __future__ import annotations

import click

from crn.commands.ensembles import (
    ensemble_options,
    ensemble_summary,
    finish_interrupted,
    horizon_text,
    run_ensemble,
)
from crn.commands.implementing import dna_settings, implementation_options
from crn.commands.options import (
    FIGURE_FILE,
    emit_json,
    json_option,
    lab_time_options,
    load,
    model_argument,
    seconds_per_time,
    seed_option,
    set_option,
)

__all__ = ["compare"]


@click.command("compare")
@model_argument
@set_option
@ensemble_options
@seed_option
@json_option
@click.option("--plot", "plot_path", type=FIGURE_FILE, default=None,
              help="Write the figure (ODE over the stochastic mean and 5-95% band; png, pdf, "
                   "svg, ...).")
@lab_time_options
@implementation_options
def compare(model, sets, runs, until, engine, workers, cluster, max_memory, force, seed, as_json,
            plot_path, implement, fuel, max_rate, toehold, leak, rate, concentration):
    """Put MODEL's mean-field ODE next to its exact stochastic runs: each label's
    probability (95% Wilson interval) beside the ODE's label, consensus-time quantiles
    beside the ODE's time, and how often a run disagrees with the ODE. With --implement:
    the formal ODE, the DNA implementation's ODE and its stochastic runs side by side."""
    from crn.analyses.compare import compare_runs, mean_field_window

    settings = dna_settings(implement, fuel=fuel, max_rate=max_rate, toehold=toehold,
                            leak=leak, rate=rate, concentration=concentration)
    loaded = load(model, sets)
    if settings is not None:
        from crn.commands.implemented_compare import compare_implemented

        compare_implemented(loaded, settings, runs=runs, until=until, engine=engine,
                            workers=workers, cluster=cluster, seed=seed, as_json=as_json,
                            plot_path=plot_path)
        return
    net = loaded.network
    seconds = seconds_per_time(net, rate, concentration)
    mean_field = mean_field_window(net, until)
    ensemble, interrupted = run_ensemble(net, runs=runs, until=mean_field.horizon,
                                         engine=engine, seed=seed, workers=workers,
                                         cluster=cluster, as_json=as_json,
                                         times=mean_field.times, max_memory=max_memory,
                                         force=force)
    result = compare_runs(mean_field, ensemble)
    if plot_path is not None and ensemble.runs:
        _write_plot(plot_path, result, loaded.name, seconds)
    if as_json:
        emit_json(_json(loaded, result))
    else:
        click.echo(_text(loaded.name, result, net))
    if interrupted:
        finish_interrupted(ensemble)


def _json(loaded, result) -> dict:
    from crn.io.ode_files import mean_field_json
    from crn.solvers.fixed_points import find_fixed_points

    # the sampled window (the figure's curves) with the consensus the disagreement uses
    ode_obj = mean_field_json(loaded, result.mean_field.ode, find_fixed_points(loaded.network),
                              consensus=result.mean_field.consensus)
    ode_obj.update(label=result.ode_label, time=result.ode_time)  # flat keys of earlier versions
    return {
        "model": loaded.name,
        "ode": ode_obj,
        "ssa": ensemble_summary(result.ensemble, loaded.name),
        "disagreement": dict(zip(("p", "low", "high"), result.disagreement, strict=True)),
    }


def _text(name, result, net) -> str:
    ensemble, ode_label, ode_time = result.ensemble, result.ode_label, result.ode_time
    lines = [f"{name}: ODE vs {ensemble.runs} stochastic runs "
             f"(engine {ensemble.engine}, horizon {horizon_text(ensemble.until, net)})",
             f"{'label':<10} {'ODE':>5} {'runs':>7} {'probability':>12}   95% interval"]
    for row in result.outcome_rows():
        mark = "<-" if row["ode"] else ""
        lines.append(f"{row['label']:<10} {mark:>5} {row['runs']:>7} {row['p']:>12.4f}   "
                     f"[{row['low']:.4f}, {row['high']:.4f}]")
    summary = ensemble.consensus_time_summary()
    ode_text = "none" if ode_time is None else f"{ode_time:.4g}"
    if summary is None:
        lines.append(f"consensus time: ODE {ode_text}; no run reached consensus")
    else:
        lines.append("consensus time: ODE {}; runs median {:.4g}, 5% {:.4g}, 95% {:.4g}, "
                     "mean {:.4g}".format(ode_text, summary["median"], summary["q05"],
                                          summary["q95"], summary["mean"]))
    lines.append("P(run differs from the ODE label {}) = {:.4f}  95% [{:.4f}, {:.4f}]"
                 .format(ode_label or "none", *result.disagreement))
    return "\n".join(lines)


def _write_plot(path, result, name, seconds=None):
    from crn.plots.compare import plot_compare
    from crn.plots.save import save_figure

    ensemble = result.ensemble
    ax = plot_compare(result.mean_field.ode, ensemble, disagreement=result.disagreement,
                      title=f"{name}\nmean field vs {ensemble.runs} exact stochastic runs "
                            f"({ensemble.engine})", seconds_per_time=seconds)
    save_figure(ax.figure, path, dpi=120)
