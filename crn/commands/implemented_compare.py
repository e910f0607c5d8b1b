"""``crn compare --implement``: formal ODE, implementation ODE and implementation runs."""

from __future__ import annotations

from types import SimpleNamespace

import click

from crn.commands.ensembles import ensemble_summary, finish_interrupted, run_ensemble
from crn.commands.implemented_ode import save_implementation_plot
from crn.commands.implementing import format_fuel, implement_network, implementation_json
from crn.commands.options import emit_json

__all__ = ["compare_implemented"]


def compare_implemented(loaded, settings, *, runs, until, engine, workers, cluster, seed,
                        as_json, plot_path) -> None:
    """Run and print the three-way comparison (the ``compare --implement`` command)."""
    from crn.analyses.compare import disagreement, mean_field_windows
    from crn.analyses.implemented import fuel_left_at_decision, fuel_left_runs
    from crn.commands.ode import mean_field_json
    from crn.core.stats import wilson_interval

    formal = loaded.network
    impl = implement_network(formal, settings)
    net = impl.network
    # one solve each, to the formal network's horizon, sampled on one shared window
    formal_window, impl_window = mean_field_windows([formal, net], until)
    horizon = formal_window.horizon
    formal_ode, impl_ode = formal_window.ode, impl_window.ode
    ensemble, interrupted = run_ensemble(net, runs=runs, until=horizon, engine=engine,
                                         seed=seed, workers=workers, cluster=cluster,
                                         as_json=as_json, times=formal_window.times)
    label, time = impl_window.consensus.label, impl_window.consensus.time
    formal_label, formal_time = formal_window.consensus.label, formal_window.consensus.time
    differ = disagreement(ensemble.labels, label)
    differ_formal = disagreement(ensemble.labels, formal_label)
    ode_fuel = fuel_left_at_decision(impl, impl_window)
    # the runs' fuel at the end of the sampled window (runs go on to the horizon)
    run_fuel = fuel_left_runs(impl, ensemble)
    if plot_path is not None and ensemble.runs:
        save_implementation_plot(
            plot_path, impl, formal_ode, impl_ode, ensemble, disagreement=differ,
            title=f"{loaded.name}\nformal ODE, {impl.scheme} implementation ODE and "
                  f"{ensemble.runs} exact stochastic runs of it")
    if as_json:
        impl_obj = mean_field_json(SimpleNamespace(name=loaded.name, network=net), impl_ode,
                                   None, consensus=impl_window.consensus)
        impl_obj.update(label=label, time=time, fuel=ode_fuel)
        formal_obj = mean_field_json(loaded, formal_ode, None, consensus=formal_window.consensus)
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
        finish_interrupted(ensemble)
