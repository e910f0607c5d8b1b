"""``crn copies``: the smallest population (and concentration, volume, hours) for a risk."""

from __future__ import annotations

import click

from crn.commands.implementing import dna_settings, implementation_options
from crn.commands.options import (
    emit_json,
    json_option,
    load,
    model_argument,
    seed_notice,
    seed_option,
    set_option,
)
from crn.commands.stochastic_model import full_network_option, stochastic_model_text
from crn.core.errors import CRNError
from crn.core.units import (
    WET_LAB_CAUTION,
    format_concentration,
    format_time,
    format_volume,
    parse_concentration,
    parse_rate_constant,
    parse_time,
    parse_volume,
)

__all__ = ["copies", "parse_deadline"]

#: :data:`crn.core.loading.LOADINGS`, repeated here so that start-up imports no numpy (tested).
LOADINGS = ("fixed", "poisson")


def parse_deadline(text: str | None):
    """``"50"`` -> (50.0, None) in parallel time; ``"2h"`` -> (None, 7200.0) in seconds."""
    if text is None:
        return None, None
    try:
        value = float(text)
    except ValueError:
        return None, parse_time(text)
    if not value > 0:
        raise CRNError(f"--deadline must be positive, got {text!r}")
    return value, None


@click.command("copies")
@model_argument
@set_option
@click.option("--gap-fraction", type=float, default=None, metavar="F",
              help="Gap as a fraction of the population, in (0, 1) (e.g. 0.05).")
@click.option("--gap", type=click.IntRange(min=0), default=None, metavar="G",
              help="A fixed gap in molecules.")
@click.option("--risk", type=click.FloatRange(0, 1, min_open=True, max_open=True), default=0.01,
              show_default=True, help="Acceptable probability of no correct decision.")
@click.option("--deadline", default=None, metavar="T",
              help="Decide by T: parallel time (a bare number) or a physical time such as 2h, "
                   "90min, 30s (needs --rate and --concentration or --volume).")
@click.option("--concentration", default=None, metavar="C",
              help="Total concentration of all agents, e.g. 10nM; the volume follows.")
@click.option("--volume", default=None, metavar="V",
              help="Volume, e.g. 1pL; the concentration follows.")
@click.option("--rate", default=None, metavar="K",
              help="Bimolecular rate constant the reactions are built at, e.g. 1e6/M/s.")
@click.option("--n-max", type=click.IntRange(min=2), default=10**7, show_default=True,
              metavar="N", help="Largest population searched.")
@click.option("--runs-max", type=click.IntRange(min=1), default=4000, show_default=True,
              help="Most stochastic runs per probed population.")
@click.option("--method", type=click.Choice(["auto", "exact", "stochastic"]), default="auto",
              show_default=True, help="Exact analysis, stochastic runs, or exact when small.")
@click.option("--loading", type=click.Choice(list(LOADINGS)), default="fixed", show_default=True,
              help="fixed: every droplet holds exactly n, split by the gap. poisson: n and the "
                   "gap are means, each input's count in a droplet is Poisson; the risk is "
                   "integrated over the loading and split into loading and kinetics.")
@seed_option(workers=False)
@json_option
@implementation_options(scale=False)
@full_network_option
def copies(model, sets, gap_fraction, gap, risk, deadline, concentration, volume, rate, n_max,
           runs_max, method, loading, seed, as_json, implement, fuel, max_rate, toehold, leak,
           full_network):
    """Smallest number of agents (molecules) of MODEL that reach the correct consensus by the
    deadline with probability at least 1 - risk, on the safe side: the 95% upper bound of the
    risk at the reported n lies below --risk (per population a 95% interval, simultaneous over
    the sequential looks, Clopper-Pearson with Bonferroni), and one lattice step below it does
    not. With physical options: the concentration or volume and the time in seconds and hours.
    With --implement the search runs on the DNA implementation, beside the formal answer:
    more copies, a later decision, or no droplet size at all and why (fuel runs out, leak
    dominates)."""
    from crn.analyses.cells import cell_networks
    from crn.analyses.copies import p_wrong_summary, physical_answer, risk_parts, smallest_n
    from crn.analyses.copies import parallel_deadline as deadline_in_parallel_time

    settings = dna_settings(implement, fuel=fuel, max_rate=max_rate, toehold=toehold,
                            leak=leak, rate=rate, concentration=concentration)
    if full_network and settings is None:
        raise CRNError("--full-network needs --implement SCHEME")
    if (gap_fraction is None) == (gap is None):
        raise CRNError("give exactly one of --gap-fraction and --gap")
    if concentration is not None and volume is not None:
        raise CRNError("give --concentration or --volume, not both")
    conc = None if concentration is None else parse_concentration(concentration)
    vol = None if volume is None else parse_volume(volume)
    k = None if rate is None else parse_rate_constant(rate)
    parallel_deadline, deadline_seconds = parse_deadline(deadline)
    if deadline_seconds is not None:
        if k is None or (conc is None and vol is None):
            raise CRNError("a deadline in physical time needs --rate and --concentration or "
                           "--volume (to convert it into parallel time)")
        parallel_deadline = deadline_in_parallel_time(deadline_seconds, k,
                                                      concentration_molar=conc,
                                                      volume_liters=vol)
    model_obj = load(model, sets)
    networks = cell_networks(model_obj)
    answer = None
    try:
        if settings is None:
            result = smallest_n(networks, gap_fraction=gap_fraction, gap=gap, risk=risk,
                                deadline=parallel_deadline, n_max=n_max, method=method,
                                runs_max=runs_max, rng=seed, workers=1, loading=loading,
                                scale_deadline=deadline_seconds is not None)
        else:
            from crn.analyses.design_questions import implementation_copies
            from crn.commands.implementing import implementation_errors

            answer = implementation_errors(
                implementation_copies, networks, *settings,
                volume_liters=vol if conc is None else None, gap_fraction=gap_fraction,
                gap=gap, risk=risk, deadline=parallel_deadline, n_max=n_max, method=method,
                runs_max=runs_max, rng=seed, workers=1, loading=loading,
                scale_deadline=deadline_seconds is not None, full_network=full_network)
            result = answer.implemented
    except KeyboardInterrupt:
        from crn.commands.options import stop_interrupted

        stop_interrupted("before the search finished; no answer (an unfinished search has no "
                         "safe n to report)")
    phys = physical_answer(result, concentration_molar=conc, volume_liters=vol, rate=k)
    models = None if answer is None else _stochastic_models(
        networks, settings, vol if conc is None else None, full_network,
        answer.implemented.probes)
    if as_json:
        emit_json({
            "model": model_obj.name,
            "n": {"estimate": result.estimate, "low": result.low, "high": result.high},
            "gap": result.gap_estimate,
            "risk": risk,
            "deadline": result.deadline,
            "deadline_seconds": deadline_seconds,
            "concentration_molar": phys["concentration_molar"],
            "volume_liters": phys["volume_liters"],
            "volume_liters_interval": phys["volume_liters_interval"],
            "concentration_molar_interval": phys["concentration_molar_interval"],
            "median_time": result.median_time,
            "seconds": phys["seconds"],
            "hours": phys["hours"],
            "method": result.method,
            "loading": result.loading,
            "bracket": {"passes": result.estimate, "fails": result.below},
            "p_wrong": p_wrong_summary(result.at_estimate),
            "p_wrong_below": p_wrong_summary(result.at_below),
            "risk_parts": risk_parts(result.at_estimate),
            "seed": result.seed_entropy,
            "probes": [p.__dict__ for p in result.probes],
            "caution": WET_LAB_CAUTION,
            **({} if answer is None else _implementation_json(answer, settings, models)),
        })
        return
    if seed is None:
        seed_notice(result.seed_entropy)
    click.echo(_text(model_obj.name, result, phys, deadline_seconds))
    if answer is not None:
        click.echo(_implementation_text(answer, settings))
        click.echo(stochastic_model_text(models))


def _stochastic_models(networks, settings, volume_liters, full_network, probes) -> dict:
    """Which model ran the stochastic probes of the implementation's search."""
    from crn.analyses.implemented import ImplementedCells

    cells = ImplementedCells(networks, *settings, volume_liters, full_network=full_network)
    return cells.stochastic_models([(p.n, p.gap) for p in probes if p.method != "exact"])


def _implementation_json(answer, settings, models) -> dict:
    formal = answer.formal
    diagnosis = answer.diagnosis
    return {
        "implementation": {"scheme": settings[0], "parameters": settings[1].as_dict(),
                           "stochastic_model": models},
        "formal": None if formal is None else {
            "n": {"estimate": formal.estimate, "low": formal.low, "high": formal.high},
            "median_time": formal.median_time, "method": formal.method,
            "probes": [p.__dict__ for p in formal.probes]},
        "verdict": answer.verdict,
        "extra_copies": answer.extra_copies,
        "slowdown": answer.slowdown,
        "diagnosis": None if diagnosis is None else {
            "reason": diagnosis.reason, "text": diagnosis.text(),
            "formal_time": diagnosis.formal_time, "time": diagnosis.time,
            "label": diagnosis.label, "fuel": diagnosis.fuel_left,
            "time_without_leak": diagnosis.time_without_leak},
    }


def _implementation_text(answer, settings) -> str:
    scheme, params = settings
    formal = answer.formal
    lines = [f"on the {scheme} DNA implementation (fuel {format_concentration(params.fuel_molar)}"
             f"{'' if params.fuel is not None else ' by default'}, leak {params.leak:g} /M/s): "
             f"{answer.verdict}"]
    if formal is not None:
        lines.append(f"  formal network: n = {_n(formal.estimate)} "
                     f"({_n(formal.low)} .. {_n(formal.high)})"
                     + ("" if formal.median_time is None
                        else f", median consensus time {formal.median_time:.4g}"))
    if answer.extra_copies is not None:
        lines.append(f"  the implementation needs {answer.extra_copies:.3g}x the formal copies")
    if answer.slowdown is not None:
        lines.append(f"  median consensus time {answer.slowdown:.3g}x the formal one"
                     + (f": a deadline binds as if {1 - 1 / answer.slowdown:.0%} shorter"
                        if answer.slowdown > 1 else ""))
    if answer.diagnosis is not None:
        lines.append(f"  no droplet size works: {answer.diagnosis.text()}")
    return "\n".join(lines)


def _interval(probe) -> str:
    p, low, high = probe.p_wrong
    if probe.method == "exact":
        return f"P(wrong) = {p:.3g} (exact)"
    return f"P(wrong) = {p:.3g} (95% interval {low:.3g} .. {high:.3g}, {probe.trials:,} runs)"


def _text(name, result, phys, deadline_seconds) -> str:
    target = f"P(correct consensus{'' if result.deadline is None else ' by the deadline'})"
    mean = " (mean per droplet, Poisson loading)" if result.loading == "poisson" else ""
    lines = [f"{name}: smallest population{mean} with {target} >= {1 - result.risk:g}"]
    if result.estimate is None:
        lines.append("  no population up to --n-max meets the risk"
                     + (" (the deadline may be too short)" if result.deadline else ""))
        lines.append(f"  {WET_LAB_CAUTION}")
        return "\n".join(lines)
    at, below = result.at_estimate, result.at_below
    sure = "" if at.method == "exact" else " with 95% confidence"
    lines.append(f"  n = {result.estimate:,} (gap {result.gap_estimate:,}): {_interval(at)}, "
                 f"below the risk {result.risk:g}{sure} [{result.method}]")
    if below is not None:
        lines.append(f"  one step below, n = {below.n:,}: {_interval(below)}, not surely below "
                     f"the risk")
    if result.low is not None and result.low < result.estimate:
        lines.append(f"  allowing for sampling error the smallest n could be as low as "
                     f"{result.low:,}")
    if at.loading == "poisson":
        about = "" if at.method == "exact" else "about "
        lines.append(f"  P(wrong) by cause: {about}{at.wrong_loading:.3g} from droplets whose "
                     f"counts reversed or tied the gap (P = {at.reversal:.3g}), "
                     f"{about}{at.wrong_kinetics:.3g} from the kinetics")
    if result.deadline is not None:
        lines.append(f"  deadline: {result.deadline:.4g} parallel time"
                     + (f" ({format_time(deadline_seconds)})" if deadline_seconds else ""))
    if result.median_time is not None:
        lines.append(f"  median consensus time at n: {result.median_time:.4g} parallel time")
    if phys["concentration_molar"] is not None:
        lines.append(f"  concentration {format_concentration(phys['concentration_molar'])}, "
                     f"volume {format_volume(phys['volume_liters'])}")
    if phys["seconds"] is not None:
        lines.append(f"  consensus in about {format_time(phys['seconds'])} "
                     f"({phys['seconds']:.4g} s)")
    lines.append(f"  {WET_LAB_CAUTION}")
    return "\n".join(lines)


def _n(value):
    return "none" if value is None else f"{value:,}"
