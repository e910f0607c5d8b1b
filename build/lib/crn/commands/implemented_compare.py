"""``crn compare --implement``: formal ODE, implementation ODE and implementation runs."""

from __future__ import annotations

from types import SimpleNamespace

import click
import numpy as np

from crn.commands.compare import _SAMPLES, compare_window, disagreement
from crn.commands.implemented_ode import save_implementation_plot
from crn.commands.implementing import format_fuel, implement_network, implementation_json
from crn.commands.options import emit_json
from crn.commands.ssa import _finish_interrupted, ensemble_summary, run_ensemble

__all__ = ["compare_implemented"]


def compare_implemented(loaded, settings, *, runs, until, engine, workers, cluster, seed,
                        as_json, plot_path) -> None:
    """Run and print the three-way comparison (the ``compare --implement`` command)."""
    from crn.analyses.implemented import fuel_left_ode, fuel_left_runs
    from crn.commands.ode import mean_field_json
    from crn.core.stats import wilson_interval
    from crn.solvers.ode import solve_mean_field
    from crn.solvers.simulate import default_horizon

    formal = loaded.network
    impl = implement_network(formal, settings)
    net = impl.network
    horizon = default_horizon(formal) if until is None else float(until)
    formal_first = solve_mean_field(formal, until=horizon)
    impl_first = solve_mean_field(net, until=horizon)
    times_of = [t for t in (formal_first.consensus.time, impl_first.consensus.time)
                if t is not None]
    window = compare_window(max(times_of) if times_of else None, horizon)
    times = np.linspace(0.0, window, _SAMPLES)
    formal_ode = solve_mean_field(formal, times=times, until=window, stop_at_consensus=False)
    impl_ode = solve_mean_field(net, times=times, until=window, stop_at_consensus=False)
    ensemble, interrupted = run_ensemble(net, runs=runs, until=horizon, engine=engine,
                                         seed=seed, workers=workers, cluster=cluster,
                                         as_json=as_json, times=times)
    label, time = impl_first.consensus.label, impl_first.consensus.time
    formal_label, formal_time = formal_first.consensus.label, formal_first.consensus.time
    differ = disagreement(ensemble.labels, label)
    differ_formal = disagreement(ensemble.labels, formal_label)
    ode_fuel = fuel_left_ode(impl, impl_first)
    # the runs' fuel at the end of the sampled window (runs go on to the horizon)
    run_fuel = fuel_left_runs(impl, ensemble)
    if plot_path is not None and ensemble.runs:
        save_implementation_plot(
            plot_path, impl, formal_ode, impl_ode, ensemble, disagreement=differ,
            title=f"{loaded.name}\nformal ODE, {impl.scheme} implementation ODE and "
                  f"{ensemble.runs} exact stochastic runs of it")
    if as_json:
        impl_obj = mean_field_json(SimpleNamespace(name=loaded.name, network=net), impl_ode,
                                   None, consensus=impl_first.consensus)
        impl_obj.update(label=label, time=time, fuel=ode_fuel)
        formal_obj = mean_field_json(loaded, formal_ode, None, consensus=formal_first.consensus)
        formal_obj.update(label=formal_label, time=formal_time)
        ssa_obj = ensemble_summary(ensemble, loaded.name)
        ssa_obj["fuel"] = run_fuel
        emit_json({
            "model": loaded.name,
            "implementation": implementation_json(impl),
            "formal_ode": formal_obj,
            "ode": impl_obj,
            "ssa": ssa_obj,
            "fuel": ode_fuel,
            "disagreement": dict(zip(("p", "low", "high"), differ, strict=True)),
            "disagreement_formal": dict(zip(("p", "low", "high"), differ_formal, strict=True)),
        })
    else:
        lines = [f"{loaded.name}: formal ODE vs its {impl.scheme} DNA implementation "
                 f"({net.n_species} species): ODE and {ensemble.runs} stochastic runs "
                 f"(engine {ensemble.engine}, horizon {ensemble.until:.4g}, formal time unit "
                 f"= {impl.params.seconds_per_time_unit:.4g} s)",
                 f"{'label':<10} {'formal':>6} {'DNA':>5} {'runs':>7} {'probability':>12}"
                 f"   95% interval"]
        outcomes = ensemble.outcomes()
        shown = set(outcomes) | ({label, formal_label} - {None})
        for name in sorted(shown, key=lambda s: (s == "none", -outcomes.get(s, 0))):
            k = outcomes.get(name, 0)
            p, low, high = wilson_interval(k, ensemble.runs)
            lines.append(f"{name:<10} {'<-' if name == formal_label else '':>6} "
                         f"{'<-' if name == label else '':>5} {k:>7} {p:>12.4f}   "
                         f"[{low:.4f}, {high:.4f}]")
        summary = ensemble.consensus_time_summary()

        def fmt(t):
            return "none" if t is None else f"{t:.4g}"

        runs_text = ("no run reached consensus" if summary is None else
                     "runs median {:.4g}, 5% {:.4g}, 95% {:.4g}".format(
                         summary["median"], summary["q05"], summary["q95"]))
        lines.append(f"consensus time: formal ODE {fmt(formal_time)}; DNA ODE {fmt(time)}; "
                     f"DNA {runs_text}")
        lines.append("P(run differs from the DNA ODE label {}) = {:.4f}  95% [{:.4f}, {:.4f}]"
                     .format(label or "none", *differ))
        lines.append("P(run differs from the formal ODE label {}) = {:.4f}  95% [{:.4f}, {:.4f}]"
                     .format(formal_label or "none", *differ_formal))
        lines.append(format_fuel(ode_fuel) + " (DNA ODE, at its consensus or horizon)")
        click.echo("\n".join(lines))
    if interrupted:
        _finish_interrupted(ensemble)
