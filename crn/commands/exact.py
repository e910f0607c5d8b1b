"""``crn exact``: exact decision probabilities and consensus time of a small population."""

from __future__ import annotations

import click

from crn.commands.implementing import dna_settings, implementation_options
from crn.commands.options import (
    counting,
    emit_json,
    guard,
    guard_options,
    json_option,
    load,
    model_argument,
    progress_bar,
    set_option,
    stop_interrupted,
)

__all__ = ["exact"]


def _counts(net, x) -> str:
    return ", ".join(f"{s}={int(c)}" for s, c in zip(net.species, x, strict=True))


@click.command("exact")
@model_argument
@set_option
@click.option("--until", type=click.FloatRange(min=0), default=None, metavar="T",
              help="Also give the probability of each decision by time T (finite state "
                   "projection).")
@click.option("--max-states", type=click.IntRange(min=1), default=None, metavar="N",
              help="Refuse (or, with --until, project onto) more configurations than N "
                   "(default 10,000,000).")
@guard_options
@json_option
@implementation_options
def exact(model, sets, until, max_states, max_memory, force, as_json, implement, fuel, max_rate,
          toehold, leak, rate, concentration):
    """Exact outcome probabilities of MODEL from its initial counts, by solving the
    continuous-time Markov chain over every reachable configuration. With --implement,
    of the DNA implementation (small populations and little fuel only: every fuel
    molecule multiplies the configurations)."""
    from crn.runtime.guards import exact_estimate
    from crn.runtime.interrupts import call_interruptibly
    from crn.solvers.exact import exact_outcomes, transient_outcomes

    settings = dna_settings(implement, fuel=fuel, max_rate=max_rate, toehold=toehold,
                            leak=leak, rate=rate, concentration=concentration)
    net = load(model, sets).network
    impl = None
    if settings is not None:
        from crn.commands.implementing import implement_network

        impl = implement_network(net, settings)
        net = impl.network
    guard(exact_estimate(net), max_memory, force, announce=not as_json)
    seen = [0]
    try:
        with progress_bar("configurations", None, enabled=not as_json) as bar:
            result = call_interruptibly(exact_outcomes, net, max_states=max_states,
                                        progress=counting(bar, seen))
    except KeyboardInterrupt:
        stop_interrupted(f"after enumerating {seen[0]:,} configurations; no result")
    transient = None
    if until is not None:
        try:
            with progress_bar("projection", None, enabled=not as_json) as update:
                transient = call_interruptibly(transient_outcomes, net, until,
                                               max_states=max_states, progress=update)
        except KeyboardInterrupt:
            _print(net, result, None, until, as_json, impl)
            stop_interrupted("during the projection to --until; the eventual probabilities "
                             "above are complete")
    _print(net, result, transient, until, as_json, impl)


def _print(net, result, transient, until, as_json, impl=None):
    from crn.core.outcome import NO_CONSENSUS

    if as_json:
        obj = {
            "model": net.name,
            "initial": dict(zip(net.species, net.initial.tolist(), strict=True)),
            "states": result.states,
            "transitions": result.transitions,
            "probabilities": result.probabilities,
            "expected_time": result.expected_time,
            "time_std": result.time_std,
            "correct": result.correct,
            "method": result.method,
            "status": result.status,
            "message": result.message,
        }
        if transient is not None:
            obj["transient"] = {
                "until": until,
                "probabilities": {k: v for k, v in transient.items() if k != "lost"},
                "lost": transient["lost"],
            }
        if impl is not None:
            from crn.commands.implementing import implementation_json

            obj["implementation"] = implementation_json(impl)
        emit_json(obj)
        return
    clock = "parallel time" if net.from_protocol else "time"
    lines = [
        f"{net.name}: {_counts(net, net.initial)}" if impl is None else
        f"{net.name}: {_counts(impl.formal, impl.formal.initial)} and "
        f"{sum(int(net.initial[net.index[s]]) for s in impl.fuel)} fuel molecules "
        f"({net.n_species} species; times in the formal network's unit)",
        f"{result.states:,} configurations, {result.transitions:,} transitions "
        f"({result.method} solve)",
    ]
    if result.correct is not None:
        lines.append(f"correct answer: {result.correct}")
    lines.append("probability of stable consensus")
    width = max(len(k) for k in result.probabilities)
    for label, p in result.probabilities.items():
        name = "never" if label == NO_CONSENSUS else label
        lines.append(f"  {name:<{max(width, 5)}}  {p:.12g}")
    if result.expected_time == result.expected_time:  # not NaN
        given = "" if result.probabilities.get(NO_CONSENSUS, 0.0) == 0 else " (given consensus)"
        lines.append(f"time to stable consensus{given}: mean {result.expected_time:.6g}, "
                     f"sd {result.time_std:.6g} ({clock})")
    else:
        lines.append("stable consensus is never reached")
    if transient is not None:
        lines.append(f"decided by T = {until:g} ({clock})")
        for label, p in transient.items():
            if label == "lost":
                continue
            name = "undecided" if label == NO_CONSENSUS else label
            lines.append(f"  {name:<{max(width, 9)}}  {p:.12g}")
        lines.append(f"  projection error bound (lost mass): {transient['lost']:.3g}")
    if result.status:
        lines.append(f"warning: {result.message}")
    click.echo("\n".join(lines))
