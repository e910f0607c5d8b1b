"""``crn regimes``: sweep n and the gap, flag where the mean field misleads, fit the boundary."""

from __future__ import annotations

import hashlib
import json
import os
import signal
from pathlib import Path
from typing import TYPE_CHECKING

import click

from crn.commands.implementing import dna_options, dna_settings, implement_option
from crn.commands.options import (
    CLUSTER_ADDRESS,
    FIGURE_FILE,
    OUTPUT_FILE,
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
from crn.core.errors import CRNError
from crn.io.atomic import save_figure, write_atomic
from crn.io.regime_tables import table_csv

if TYPE_CHECKING:
    from crn.analyses.regimes import RegimeMap

__all__ = ["regimes", "parse_int_list", "parse_float_list", "cell_networks"]

#: Test hook: the process kills itself (SIGKILL) after appending this many cells.
KILL_HOOK = "CRN_TEST_KILL_AFTER_CELLS"


def _number(text: str, what: str) -> float:
    try:
        return float(text)
    except ValueError as err:
        raise CRNError(f"{what}: cannot read {text!r} as a number") from err


def parse_int_list(text: str, what: str) -> list[int]:
    """``"100,1e3,10000"`` -> ``[100, 1000, 10000]``; whole numbers only."""
    out = []
    for item in text.split(","):
        value = _number(item.strip(), what)
        if not value.is_integer():
            raise CRNError(f"{what}: {item.strip()!r} is not a whole number")
        out.append(int(value))
    return out


def parse_float_list(text: str, what: str) -> list[float]:
    """``"0.001,0.01"`` -> ``[0.001, 0.01]``."""
    return [_number(item.strip(), what) for item in text.split(",")]


def cell_networks(model_path: str, sets):
    """The per-cell network builder: model parameters n and gap when the TOML model has both."""
    from crn.analyses.probes import InitialSplit, ModelParameters
    from crn.core.model import parse_overrides

    model = load(model_path, sets)
    path = Path(model_path)
    if path.suffix != ".py" and {"n", "gap"} <= set(model.parameters):
        overrides = {k: v for k, v in parse_overrides(sets).items() if k not in ("n", "gap")}
        return model, ModelParameters(path.read_text(encoding="utf-8"), str(path),
                                      tuple(sorted(overrides.items())))
    return model, InitialSplit(model.network)


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
@click.option("--gap", "gap_list", default=None, metavar="LIST",
              help="Absolute gaps, comma-separated; cells whose gap differs from n in parity "
                   "are skipped.")
@click.option("--gap-fraction", "fraction_list", default=None, metavar="LIST",
              help="Gaps as fractions of n, each in (0, 1), rounded to the nearest gap of n's "
                   "parity.")
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
@click.option("--plot", "plot_file", type=FIGURE_FILE, default=None,
              help="Write the heatmap figure (png, pdf, svg, ...).")
@click.option("--csv", "csv_file", type=OUTPUT_FILE, default=None,
              help="Write the table as CSV.")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None,
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
@implement_option
@dna_options
@click.option("--leak-tolerance", "with_leak_tolerance", is_flag=True,
              help="With --implement: for each cell, the largest leak rate constant at which "
                   "it stays ok with the correct decision (many more runs).")
def regimes(model, sets, n_list, gap_list, fraction_list, risk, until, runs_max, time_factor,
            method, plot_file, csv_file, out_dir, resume, workers, cluster, max_memory, force,
            seed, as_json, implement, fuel, max_rate, toehold, leak, rate, concentration,
            with_leak_tolerance):
    """Sweep MODEL over populations n and gaps: for each cell, the ODE's decision, the
    probability that a stochastic run disagrees with it (95% interval, simultaneous over the
    sequential looks (Clopper-Pearson, Bonferroni)), the flag, the times;
    and the fitted growth of the critical gap with n. With --implement every cell runs on
    the DNA implementation of its network (same time unit, decisions from the signals)."""
    import numpy as np

    from crn.analyses.regimes import RegimeCell, plan_cells, regime_map
    from crn.io.sweep_store import SweepStore

    settings = dna_settings(implement, fuel=fuel, max_rate=max_rate, toehold=toehold,
                            leak=leak, rate=rate, concentration=concentration)
    if with_leak_tolerance and settings is None:
        raise CRNError("--leak-tolerance needs --implement SCHEME")
    if (gap_list is None) == (fraction_list is None):
        raise CRNError("give exactly one of --gap and --gap-fraction")
    if workers and cluster:
        raise CRNError("give --workers or --cluster, not both")
    if resume and not out_dir:
        raise CRNError("--resume needs --out DIR (where the results file is)")
    ns = parse_int_list(n_list, "--n")
    gaps = None if gap_list is None else parse_int_list(gap_list, "--gap")
    fractions = None if fraction_list is None else parse_float_list(fraction_list,
                                                                    "--gap-fraction")
    cells, skipped = plan_cells(ns, gaps, fractions)
    model_obj, networks = cell_networks(model, sets)
    formal_networks = networks
    if settings is not None:
        from crn.analyses.implemented import ImplementedCells
        from crn.commands.implementing import implement_network

        networks = ImplementedCells(networks, *settings)
        implement_network(model_obj.network, settings)  # parameter errors before any cell
    for n, g in skipped:
        click.echo(f"crn: skipping n={n}, gap={g}: (n + gap) / 2 is not whole", err=True)
    from crn.analyses.regimes import DEFAULT_EXACT_MAX
    from crn.runtime.guards import regime_map_estimate

    guard(regime_map_estimate(networks, cells, runs_max=runs_max, until=until, method=method,
                              exact_max=DEFAULT_EXACT_MAX, workers=workers or 1),
          max_memory, force, announce=not as_json)

    entropy = np.random.SeedSequence(seed).entropy
    done, store, new_cells = {}, None, []
    if out_dir:
        parameters = {
            "model": Path(model).name,
            "model_sha256": hashlib.sha256(Path(model).read_bytes()).hexdigest(),
            "sets": sorted(sets), "n": ns, "gap": gaps, "gap_fraction": fractions,
            "risk": risk, "until": until, "runs_max": runs_max, "time_factor": time_factor,
            "method": method,
        }
        if settings is not None:
            parameters["implement"] = {"scheme": settings[0],
                                       "parameters": settings[1].as_dict()}
        store = SweepStore(out_dir, "regimes", parameters, seed_entropy=entropy, resume=resume,
                           check_seed=seed is not None)
        entropy = store.seed_entropy
        done = {(c["n"], c["gap"]): RegimeCell.from_dict(c) for c in store.finished}
    kill_after = os.environ.get(KILL_HOOK)

    def on_cell(cell):
        new_cells.append(cell)
        if store is None:
            return
        store.append(cell.to_dict())
        if kill_after is not None and len(store.finished) >= int(kill_after):
            os.kill(os.getpid(), signal.SIGKILL)
    if seed is None and not as_json:
        seed_notice(entropy)

    try:
        with progress_bar("cells", len(cells), enabled=not as_json) as update:
            result = regime_map(networks, ns, gaps=gaps, gap_fractions=fractions, risk=risk,
                                until=until, runs_max=runs_max, time_factor=time_factor,
                                method=method, rng=entropy, workers=workers, cluster=cluster,
                                done=done, on_cell=on_cell, progress=update)
    except KeyboardInterrupt:
        _report_interrupted(sorted([*done.values(), *new_cells], key=lambda c: (c.n, c.gap)),
                            len(cells), out_dir)
    table = table_csv(result.cells)
    payload = result_json(model_obj.name, result)
    tolerances = None
    if settings is not None:
        payload["implementation"] = {"scheme": settings[0], "parameters": settings[1].as_dict()}
        if with_leak_tolerance:
            tolerances = _leak_tolerances(formal_networks, result, settings, risk=risk,
                                          runs_max=runs_max, until=until, entropy=entropy,
                                          as_json=as_json)
            payload["leak_tolerance"] = tolerances
    if out_dir:
        write_atomic(Path(out_dir) / "regimes.csv", table)
        write_atomic(Path(out_dir) / "regimes.json",
                     json.dumps(to_jsonable(payload), indent=2) + "\n")
    if csv_file:
        write_atomic(csv_file, table)
    if plot_file:
        _save_plot(result, plot_file, model_obj.name)
    if as_json:
        emit_json(payload)
        return
    click.echo(_text(model_obj.name, result))
    if settings is not None:
        click.echo(f"(cells run on the {settings[0]} DNA implementation; times in the formal "
                   f"network's unit = {settings[1].seconds_per_time_unit:.4g} s at the given "
                   f"concentration)")
    if tolerances is not None:
        click.echo(_tolerance_text(tolerances, risk))


def _leak_tolerances(formal_networks, result, settings, *, risk, runs_max, until, entropy,
                     as_json):
    from crn.analyses.design_questions import leak_tolerance

    scheme, params = settings
    out = []
    with progress_bar("leak tolerance", len(result.cells), enabled=not as_json) as update:
        for i, cell in enumerate(result.cells):
            answer = leak_tolerance(formal_networks, cell.n, cell.gap, scheme, params, risk=risk,
                                    runs_max=runs_max, rng=entropy, until=until)
            out.append({"n": cell.n, "gap": cell.gap, "leak": answer.leak,
                        "failing": answer.failing, "horizon": answer.horizon,
                        "tried": list(answer.tried)})
            update(i + 1)
    return out


def _tolerance_text(tolerances, risk) -> str:
    lines = [f"leak tolerance (largest leak, /M/s, at which the cell stays ok at risk {risk:g} "
             "with the correct decision by the horizon):",
             f"{'n':>10} {'gap':>8} {'tolerated':>11} {'fails at':>10}"]
    for t in tolerances:
        tolerated = "not ok at 0" if t["leak"] is None else f"{t['leak']:.3g}"
        fails = "-" if t["failing"] is None else f"{t['failing']:.3g}"
        lines.append(f"{t['n']:>10} {t['gap']:>8} {tolerated:>11} {fails:>10}")
    return "\n".join(lines)


def _report_interrupted(finished, total, out_dir):
    """After Ctrl-C or SIGTERM: the finished cells, where they are kept, and the exit status."""
    from crn.runtime import interrupts

    lines = [f"{c.n:>10} {c.gap:>8} {c.p_wrong:>12.4g} [{c.low:8.3g}, {c.high:8.3g}] "
             f"{c.flag:>10}" for c in finished]
    if lines:
        click.echo("\n".join([f"{'n':>10} {'gap':>8} {'P(disagree)':>12} {'95% interval':>19} "
                               f"{'flag':>10}", *lines]))
    kept = (f"kept in {Path(out_dir) / 'regimes.jsonl'}; add --resume to finish the sweep"
            if out_dir else "not kept (give --out DIR to keep cells across interruptions)")
    click.echo(f"crn: {interrupts.reason()} after {len(finished)} of {total} cells; "
               f"finished cells {kept}", err=True)
    click.get_current_context().exit(interrupts.exit_status())


def _save_plot(result, path, name):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.plots.regimes import plot_regime_map

    ax = plot_regime_map(result, title=f"{name}: where the mean field misleads "
                                       f"(risk {result.risk:g})")
    try:
        save_figure(path, ax.figure, dpi=150)
    finally:
        plt.close(ax.figure)


def _text(name, result: RegimeMap) -> str:
    head = (f"{'n':>10} {'gap':>8} {'ODE':>5} {'t_ODE':>8} {'P(disagree)':>12} "
            f"{'95% interval':>19} {'runs':>6} {'flag':>10} {'t_SSA':>8} {'time':>7} method")
    lines = [f"{name}: regime map (risk {result.risk:g}, seed {result.seed_entropy})", head]
    for c in result.cells:
        lines.append(
            f"{c.n:>10} {c.gap:>8} {c.ode_label or '-':>5} {_fmt(c.ode_time):>8} "
            f"{c.p_wrong:>12.4g} [{c.low:8.3g}, {c.high:8.3g}] {c.runs:>6} {c.flag:>10} "
            f"{_fmt(c.ssa_median_time):>8} {c.time_flag:>7} {c.method}")
    for m in result.merged:
        lines.append(f"merged: at n={m['n']} the gap fractions "
                     + ", ".join(f"{f:g}" for f in m["gap_fractions"])
                     + f" all round to gap {m['gap']} (one cell)")
    b = result.boundary
    where = ", ".join(f"n={n}: {g:.3g}" for n, g in b.critical_gaps)
    lines.append(f"boundary: {b.describe(3)}" + (f"; critical gaps {where}" if where else ""))
    return "\n".join(lines)
