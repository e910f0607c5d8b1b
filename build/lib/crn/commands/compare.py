"""``crn compare``: the mean-field ODE and the exact stochastic ensemble side by side."""

from __future__ import annotations

import click

from crn.commands.implementing import dna_options, dna_settings, implement_option
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
from crn.commands.ssa import (
    _finish_interrupted,
    ensemble_options,
    ensemble_summary,
    horizon_text,
    run_ensemble,
)

__all__ = ["compare", "compare_window", "disagreement"]

_WINDOW_FACTOR = 2.0
_SAMPLES = 201


def compare_window(ode_time: float | None, until: float) -> float:
    """Sampled time window: twice the ODE consensus times, capped at the horizon (the whole
    horizon when the ODE reaches no consensus). Runs continue to the horizon regardless."""
    if ode_time is None or not ode_time > 0:
        return until
    return min(until, _WINDOW_FACTOR * ode_time)


def disagreement(labels, ode_label) -> tuple[float, float, float]:
    """Probability that a run's first-consensus label differs from the ODE's label (a run
    without consensus counts as differing), with its 95% Wilson interval."""
    from crn.core.stats import wilson_interval

    differ = sum(1 for label in labels if label is None or label != ode_label)
    return wilson_interval(differ, len(labels))


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
@implement_option
@dna_options
def compare(model, sets, runs, until, engine, workers, cluster, max_memory, force, seed, as_json,
            plot_path, implement, fuel, max_rate, toehold, leak, rate, concentration):
    """Put MODEL's mean-field ODE next to its exact stochastic runs: each label's
    probability (95% Wilson interval) beside the ODE's label, consensus-time quantiles
    beside the ODE's time, and how often a run disagrees with the ODE. With --implement:
    the formal ODE, the DNA implementation's ODE and its stochastic runs side by side."""
    import numpy as np

    from crn.commands.ode import mean_field_json
    from crn.core.stats import wilson_interval
    from crn.solvers.fixed_points import find_fixed_points
    from crn.solvers.ode import solve_mean_field
    from crn.solvers.simulate import default_horizon

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
    horizon = default_horizon(net) if until is None else float(until)
    ode_first = solve_mean_field(net, until=horizon)
    window = compare_window(ode_first.consensus.time, horizon)
    times = np.linspace(0.0, window, _SAMPLES)
    ode = solve_mean_field(net, times=times, until=window, stop_at_consensus=False)
    ensemble, interrupted = run_ensemble(net, runs=runs, until=horizon, engine=engine,
                                         seed=seed, workers=workers, cluster=cluster,
                                         as_json=as_json, times=times,
                                         max_memory=max_memory, force=force)
    ode_label, ode_time = ode_first.consensus.label, ode_first.consensus.time
    differ = disagreement(ensemble.labels, ode_label)
    if plot_path is not None and ensemble.runs:
        _write_plot(plot_path, ode, ensemble, differ, loaded.name, seconds)
    if as_json:
        # the sampled window (the figure's curves) with the consensus the disagreement uses
        ode_obj = mean_field_json(loaded, ode, find_fixed_points(net),
                                  consensus=ode_first.consensus)
        ode_obj.update(label=ode_label, time=ode_time)  # flat keys of earlier versions
        emit_json({
            "model": loaded.name,
            "ode": ode_obj,
            "ssa": ensemble_summary(ensemble, loaded.name),
            "disagreement": dict(zip(("p", "low", "high"), differ, strict=True)),
        })
    else:
        lines = [f"{loaded.name}: ODE vs {ensemble.runs} stochastic runs "
                 f"(engine {ensemble.engine}, horizon {horizon_text(ensemble.until, net)})",
                 f"{'label':<10} {'ODE':>5} {'runs':>7} {'probability':>12}   95% interval"]
        outcomes = ensemble.outcomes()
        for label in sorted(set(outcomes) | ({ode_label} - {None}),
                            key=lambda s: (s == "none", -outcomes.get(s, 0))):
            k = outcomes.get(label, 0)
            p, low, high = wilson_interval(k, ensemble.runs)
            mark = "<-" if label == ode_label else ""
            lines.append(f"{label:<10} {mark:>5} {k:>7} {p:>12.4f}   [{low:.4f}, {high:.4f}]")
        summary = ensemble.consensus_time_summary()
        ode_text = "none" if ode_time is None else f"{ode_time:.4g}"
        if summary is None:
            lines.append(f"consensus time: ODE {ode_text}; no run reached consensus")
        else:
            lines.append("consensus time: ODE {}; runs median {:.4g}, 5% {:.4g}, 95% {:.4g}, "
                         "mean {:.4g}".format(ode_text, summary["median"], summary["q05"],
                                              summary["q95"], summary["mean"]))
        lines.append("P(run differs from the ODE label {}) = {:.4f}  95% [{:.4f}, {:.4f}]"
                     .format(ode_label or "none", *differ))
        click.echo("\n".join(lines))
    if interrupted:
        _finish_interrupted(ensemble)


def _write_plot(path, ode, ensemble, differ, name, seconds=None):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.io.atomic import save_figure
    from crn.plots.compare import plot_compare

    ax = plot_compare(ode, ensemble, disagreement=differ,
                      title=f"{name}\nmean field vs {ensemble.runs} exact stochastic runs "
                            f"({ensemble.engine})", seconds_per_time=seconds)
    try:
        save_figure(path, ax.figure, dpi=120)
    finally:
        plt.close(ax.figure)
