"""``crn regimes``: sweep n and the gap, flag where the mean field misleads, fit the boundary."""

from __future__ import annotations

import json
import os
import signal
from pathlib import Path
from typing import TYPE_CHECKING

import click

from crn.commands.implementing import dna_settings, implementation_options
from crn.commands.lists import parse_float_list, parse_int_list
from crn.commands.options import (
    CLUSTER_ADDRESS,
    FIGURE_FILE,
    OUTPUT_FILE,
    RenamedOption,
    emit_json,
    guard,
    guard_options,
    json_option,
    load,
    model_argument,
    progress_bar,
    seed_notice,
    seed_option,
    set_option,
    to_jsonable,
)
from crn.commands.stochastic_model import full_network_option, stochastic_model_text
from crn.core.errors import CRNError
from crn.io.atomic import write_atomic
from crn.io.regime_tables import table_csv

if TYPE_CHECKING:
    from crn.analyses.regimes import RegimeMap

__all__ = ["regimes"]

#: Test hook: the process kills itself (SIGKILL) after appending this many cells.
KILL_HOOK = "CRN_TEST_KILL_AFTER_CELLS"


def _gap_fractions(text: str) -> list[float]:
    """``--gap-fractions``, each checked to lie in (0, 1)."""
    from crn.analyses.probes import GAP_FRACTION_RANGE

    fractions = parse_float_list(text, "--gap-fractions")
    for fraction in fractions:
        if not 0 < fraction < 1:
            raise CRNError(GAP_FRACTION_RANGE.replace("--gap-fraction", "--gap-fractions", 1)
                           + f", got {fraction}")
    return fractions


def result_json(model_name: str, result: RegimeMap) -> dict:
    return {
        "model": model_name,
        "risk": result.risk,
        "time_factor": result.time_factor,
        "seed": result.seed_entropy,
        "cells": result.table(),
        "exponent": {k: v for k, v in result.boundary.to_dict().items()
                     if k in ("estimate", "low", "high", "interval", "grid_low", "grid_high",
                              "bracketed", "note")},
        "boundary": result.boundary.to_dict(),
        "skipped": [{"n": n, "gap": g} for n, g in result.skipped],
        "merged": list(result.merged),
    }


def _fmt(value, spec=".3g"):
    return "-" if value is None else format(value, spec)


@click.command("regimes")
@model_argument
@set_option
@click.option("--n", "n_list", required=True, metavar="LIST",
              help="Population sizes, comma-separated (e.g. 100,1000,1e4).")
@click.option("--gaps", "gap_list", cls=RenamedOption, old=("--gap",), default=None,
              metavar="LIST",
              help="Absolute gaps, comma-separated; cells whose gap differs from n in parity "
                   "are skipped (was --gap).")
@click.option("--gap-fractions", "fraction_list", cls=RenamedOption, old=("--gap-fraction",),
              default=None, metavar="LIST",
              help="Gaps as fractions of n, each in (0, 1), rounded to the nearest gap of n's "
                   "parity (was --gap-fraction).")
@click.option("--risk", type=click.FloatRange(0, 1, min_open=True, max_open=True), default=0.01,
              show_default=True, help="Acceptable probability of disagreeing with the ODE.")
@click.option("--until", type=click.FloatRange(min=0, min_open=True), default=None, metavar="T",
              help="Horizon in parallel time (default 10x the ODE's consensus time per cell).")
@click.option("--runs-max", type=click.IntRange(min=1), default=1000, show_default=True,
              help="Most stochastic runs per cell.")
@click.option("--time-factor", type=click.FloatRange(min=1, min_open=True), default=2.0,
              show_default=True, help="Flag times when SSA median and ODE differ by more.")
@click.option("--method", type=click.Choice(["auto", "exact", "stochastic"]), default="auto",
              show_default=True, help="Exact analysis, stochastic runs, or exact when small.")
@click.option("--plot", "plot_path", type=FIGURE_FILE, default=None,
              help="Write the heatmap figure (png, pdf, svg, ...).")
@click.option("--csv", "csv_path", type=OUTPUT_FILE, default=None,
              help="Write the table as CSV.")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Directory for the results file (each cell appended as it finishes) and "
                   "the final table.")
@click.option("--resume", is_flag=True, help="Continue the sweep whose results are in --out.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Processes computing cells in parallel (default 1).")
@click.option("--cluster", type=CLUSTER_ADDRESS, default=None, metavar="ADDRESS",
              help="Dask scheduler address for the stochastic runs.")
@guard_options
@seed_option
@json_option
@implementation_options
@full_network_option
@click.option("--sample-every-cell", is_flag=True,
              help="Sample every cell in full, also those a monotone protocol's coupling "
                   "decides from an ok cell with a smaller gap (see docs/design.md).")
@click.option("--leak-tolerance", "with_leak_tolerance", is_flag=True,
              help="With --implement: for each cell, the largest leak rate constant at which "
                   "it stays ok with the correct decision (many more runs).")
def regimes(model, sets, n_list, gap_list, fraction_list, risk, until, runs_max, time_factor,
            method, plot_path, csv_path, out_dir, resume, workers, cluster, max_memory, force,
            seed, as_json, implement, fuel, max_rate, toehold, leak, rate, concentration,
            sample_every_cell, with_leak_tolerance, full_network):
    """Sweep MODEL over populations n and gaps: for each cell, the ODE's decision, the
    probability that a stochastic run disagrees with it (95% interval, simultaneous over the
    sequential looks (Clopper-Pearson, Bonferroni)), the flag, the times;
    and the fitted growth of the critical gap with n. With --implement every cell runs on
    the DNA implementation of its network (same time unit, decisions from the signals)."""
    from crn.analyses.regimes import DEFAULT_EXACT_MAX, plan_cells
    from crn.io.regime_store import open_regime_sweep, regime_sweep_parameters
    from crn.runtime.guards import regime_map_estimate

    settings = dna_settings(implement, fuel=fuel, max_rate=max_rate, toehold=toehold,
                            leak=leak, rate=rate, concentration=concentration)
    _check_options(settings, with_leak_tolerance=with_leak_tolerance,
                   full_network=full_network, gaps_given=gap_list is not None,
                   fractions_given=fraction_list is not None, workers=workers, cluster=cluster,
                   resume=resume, out_dir=out_dir)
    ns = parse_int_list(n_list, "--n")
    gaps = None if gap_list is None else parse_int_list(gap_list, "--gaps")
    fractions = None if fraction_list is None else _gap_fractions(fraction_list)
    cells, skipped = plan_cells(ns, gaps, fractions)
    model_obj = load(model, sets)
    formal_networks, networks = _cell_builders(model_obj, settings, full_network)
    for n, g in skipped:
        click.echo(f"crn: skipping n={n}, gap={g}: (n + gap) / 2 is not whole", err=True)
    guard(regime_map_estimate(networks, cells, runs_max=runs_max, until=until, method=method,
                              exact_max=DEFAULT_EXACT_MAX, workers=workers or 1),
          max_memory, force, announce=not as_json)

    parameters = None
    if out_dir:
        parameters = regime_sweep_parameters(
            model_obj, sets=sets, n=ns, gap=gaps, gap_fraction=fractions, risk=risk,
            until=until, runs_max=runs_max, time_factor=time_factor, method=method,
            implementation=settings, full_network=full_network)
    sweep = open_regime_sweep(out_dir, parameters, seed=seed, resume=resume)
    if seed is None and not as_json:
        seed_notice(sweep.seed_entropy)
    result = _run_sweep(networks, ns, sweep, len(cells), as_json, gaps=gaps,
                        gap_fractions=fractions, risk=risk, until=until, runs_max=runs_max,
                        time_factor=time_factor, method=method, workers=workers,
                        cluster=cluster, monotone=not sample_every_cell)
    payload = result_json(model_obj.name, result)
    tolerances = None
    if settings is not None:
        payload["implementation"] = _implementation_json(networks, settings, result)
        if with_leak_tolerance:
            tolerances = _leak_tolerances(formal_networks, result, settings, risk=risk,
                                          runs_max=runs_max, until=until,
                                          entropy=sweep.seed_entropy, as_json=as_json)
            payload["leak_tolerance"] = tolerances
    _write_outputs(result, payload, model_obj.name, out_dir=out_dir, csv_path=csv_path,
                   plot_path=plot_path)
    if as_json:
        emit_json(payload)
        return
    click.echo(_text(model_obj.name, result))
    if settings is not None:
        click.echo(_implementation_text(settings, payload["implementation"]))
    if tolerances is not None:
        click.echo(_tolerance_text(tolerances, risk))


def _check_options(settings, *, with_leak_tolerance, full_network, gaps_given, fractions_given,
                   workers, cluster, resume, out_dir) -> None:
    """The option combinations ``regimes`` refuses, each as a one-line error."""
    if with_leak_tolerance and settings is None:
        raise CRNError("--leak-tolerance needs --implement SCHEME")
    if full_network and settings is None:
        raise CRNError("--full-network needs --implement SCHEME")
    if gaps_given == fractions_given:
        raise CRNError("give exactly one of --gaps and --gap-fractions")
    if workers and cluster:
        raise CRNError("give --workers or --cluster, not both")
    if resume and not out_dir:
        raise CRNError("--resume needs --out DIR (where the results file is)")


def _cell_builders(model_obj, settings, full_network):
    """The formal cell builder and the one the sweep runs (the implementation's with
    --implement; its parameter errors raised before any cell)."""
    from crn.analyses.cells import cell_networks

    formal = cell_networks(model_obj)
    if settings is None:
        return formal, formal
    from crn.analyses.implemented import ImplementedCells
    from crn.commands.implementing import implement_network

    networks = ImplementedCells(formal, *settings, full_network=full_network)
    implement_network(model_obj.network, settings)  # parameter errors before any cell
    return formal, networks


def _run_sweep(networks, ns, sweep, total: int, as_json: bool, **options):
    """The regime map, each cell recorded as it finishes; Ctrl-C reports the finished cells."""
    from crn.analyses.regimes import regime_map

    kill_after = os.environ.get(KILL_HOOK)

    def on_cell(cell):
        sweep.record(cell)
        if (sweep.store is not None and kill_after is not None
                and len(sweep.store.finished) >= int(kill_after)):
            os.kill(os.getpid(), signal.SIGKILL)

    try:
        with progress_bar("cells", total, enabled=not as_json) as update:
            return regime_map(networks, ns, rng=sweep.seed_entropy, done=sweep.done,
                              on_cell=on_cell, progress=update, **options)
    except KeyboardInterrupt:
        _report_interrupted(sweep.finished(), total, sweep.path)
        raise  # not reached: the report exits


def _implementation_json(networks, settings, result) -> dict:
    scheme, params = settings
    return {"scheme": scheme, "parameters": params.as_dict(),
            "stochastic_model": networks.stochastic_models(
                [(c.n, c.gap) for c in result.cells if c.method == "stochastic"])}


def _implementation_text(settings, implementation: dict) -> str:
    scheme, params = settings
    return (f"(cells run on the {scheme} DNA implementation; times in the formal network's "
            f"unit = {params.seconds_per_time_unit:.4g} s at the given concentration)\n"
            + stochastic_model_text(implementation["stochastic_model"]))


def _write_outputs(result, payload, name, *, out_dir, csv_path, plot_path) -> None:
    """The final table and JSON in --out, the --csv table and the --plot figure."""
    table = table_csv(result.cells)
    if out_dir:
        write_atomic(Path(out_dir) / "regimes.csv", table)
        write_atomic(Path(out_dir) / "regimes.json",
                     json.dumps(to_jsonable(payload), indent=2) + "\n")
    if csv_path:
        write_atomic(csv_path, table)
    if plot_path:
        _save_plot(result, plot_path, name)


def _leak_tolerances(formal_networks, result, settings, *, risk, runs_max, until, entropy,
                     as_json):
    from crn.analyses.design_questions import leak_tolerances

    with progress_bar("leak tolerance", len(result.cells), enabled=not as_json) as update:
        answers = leak_tolerances(formal_networks, result.cells, *settings, risk=risk,
                                  runs_max=runs_max, rng=entropy, until=until, progress=update)
    return [{"n": a.n, "gap": a.gap, "leak": a.leak, "failing": a.failing,
             "horizon": a.horizon, "tried": list(a.tried)} for a in answers]


def _tolerance_text(tolerances, risk) -> str:
    lines = [f"leak tolerance (largest leak, /M/s, at which the cell stays ok at risk {risk:g} "
             "with the correct decision by the horizon):",
             f"{'n':>10} {'gap':>8} {'tolerated':>11} {'fails at':>10}"]
    for t in tolerances:
        tolerated = "not ok at 0" if t["leak"] is None else f"{t['leak']:.3g}"
        fails = "-" if t["failing"] is None else f"{t['failing']:.3g}"
        lines.append(f"{t['n']:>10} {t['gap']:>8} {tolerated:>11} {fails:>10}")
    return "\n".join(lines)


def _report_interrupted(finished, total, results_path):
    """After Ctrl-C or SIGTERM: the finished cells, where they are kept, and the exit status."""
    from crn.runtime import interrupts

    lines = [f"{c.n:>10} {c.gap:>8} {c.p_wrong:>12.4g} [{c.low:8.3g}, {c.high:8.3g}] "
             f"{c.flag:>10}" for c in finished]
    if lines:
        click.echo("\n".join([f"{'n':>10} {'gap':>8} {'P(disagree)':>12} {'95% interval':>19} "
                               f"{'flag':>10}", *lines]))
    kept = (f"kept in {results_path}; add --resume to finish the sweep"
            if results_path is not None
            else "not kept (give --out DIR to keep cells across interruptions)")
    click.echo(f"crn: {interrupts.reason()} after {len(finished)} of {total} cells; "
               f"finished cells {kept}", err=True)
    click.get_current_context().exit(interrupts.exit_status())


def _save_plot(result, path, name):
    from crn.plots.save import save_figure, use_file_backend

    use_file_backend()
    from crn.plots.regimes import plot_regime_map

    ax = plot_regime_map(result, title=f"{name}: where the mean field misleads "
                                       f"(risk {result.risk:g})")
    save_figure(ax.figure, path, dpi=150)


def _text(name, result: RegimeMap) -> str:
    head = (f"{'n':>10} {'gap':>8} {'ODE':>5} {'t_ODE':>8} {'P(disagree)':>12} "
            f"{'95% interval':>19} {'runs':>6} {'flag':>10} {'t_SSA':>8} {'time':>7} method")
    lines = [f"{name}: regime map (risk {result.risk:g}, seed {result.seed_entropy})", head]
    for c in result.cells:
        lines.append(
            f"{c.n:>10} {c.gap:>8} {c.ode_label or '-':>5} {_fmt(c.ode_time):>8} "
            f"{c.p_wrong:>12.4g} [{c.low:8.3g}, {c.high:8.3g}] {c.runs:>6} {c.flag:>10} "
            f"{_fmt(c.ssa_median_time):>8} {c.time_flag:>7} {c.how}")
    for m in result.merged:
        lines.append(f"merged: at n={m['n']} the gap fractions "
                     + ", ".join(f"{f:g}" for f in m["gap_fractions"])
                     + f" all round to gap {m['gap']} (one cell)")
    b = result.boundary
    where = ", ".join(f"n={n}: {g:.3g}" for n, g in b.critical_gaps)
    lines.append(f"boundary: {b.describe(3)}" + (f"; critical gaps {where}" if where else ""))
    return "\n".join(lines)
