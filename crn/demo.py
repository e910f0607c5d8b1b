"""The demo: a droplet assay that types a crop pathogen by which signature strand is more abundant.

Run ``python -m crn.demo --out out`` (``make demo``). It prints the translated
network, compares the mean-field ODE with stochastic runs, maps where the mean
field misleads, and answers the designer's question: which droplet volumes and
concentrations decide a 5% gap at 1% risk within two hours. Figures, tables and
a JSON summary go to ``--out``.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np

from crn.analyses.copies import Prober, smallest_n
from crn.analyses.probes import InitialSplit, gap_for_fraction, ode_decision, stochastic_decisions
from crn.analyses.regimes import regime_map
from crn.core.stats import wilson_interval
from crn.core.units import (
    WET_LAB_CAUTION,
    format_concentration,
    format_time,
    format_volume,
    parse_concentration,
    parse_rate_constant,
    parse_time,
    to_parallel_time,
    to_seconds,
    volume_for,
)
from crn.io.atomic import write_atomic
from crn.io.jsonable import to_jsonable
from crn.io.models import load_model
from crn.io.regime_tables import table_csv
from crn.runtime.seeds import root_seed

__all__ = ["run_demo", "main", "SETTINGS", "REPORT"]

#: The printed report, saved in the output directory too.
REPORT = "report.txt"

MODEL = Path(__file__).resolve().parent / "data" / "droplet_assay.toml"

#: Full settings (``make demo``) and a small, fast variant for the test suite.
SETTINGS = {
    "full": dict(compare_n=6000, compare_runs=400,
                 map_n=[100, 300, 1000, 3000, 10000],
                 map_fractions=[0.01, 0.02, 0.05, 0.1, 0.2], map_runs_max=800,
                 gap_fraction=0.05, risk=0.01, deadline="2h", rate="1e6/M/s",
                 concentrations=["1nM", "2nM", "3nM", "5nM", "10nM", "20nM", "50nM", "100nM"],
                 copies_runs_max=2000, transient_max=10_000, loading="poisson"),
    "quick": dict(compare_n=600, compare_runs=100, map_n=[100, 1000],
                  map_fractions=[0.05, 0.2], map_runs_max=200,
                  gap_fraction=0.2, risk=0.05, deadline="2h", rate="1e6/M/s",
                  concentrations=["1nM", "10nM"], copies_runs_max=400, transient_max=1_000,
                  loading="poisson"),
}


def _figure_path(out: Path, name: str, figure) -> Path:
    from crn.plots.save import save_figure

    path = out / name
    save_figure(figure, path, dpi=150)
    return path


def _compare(net, n, gap_fraction, runs, seed, rate, concentration, echo):
    gap = gap_for_fraction(n, gap_fraction)
    cell = InitialSplit(net)(n, gap)
    label, ode_time = ode_decision(cell, 1e4)
    labels, times = stochastic_decisions(cell, runs, 10 * max(ode_time or 10.0, 1.0),
                                         seed, workers=1)
    wrong = sum(1 for x in labels if x != label)
    p, low, high = wilson_interval(wrong, runs)
    finite = np.nan_to_num(times, nan=np.inf)
    median = float(np.median(finite))
    q05, q95 = (float(q) for q in np.quantile(finite, [0.05, 0.95]))

    def seconds(t):
        return format_time(to_seconds(t, rate, concentration))

    echo(f"\n== ODE against stochastic runs: n = {n:,} strands, gap {gap} "
         f"({gap / n:.0%}), at {format_concentration(concentration)} ==")
    echo(f"  ODE: consensus on {label} at parallel time {ode_time:.3g} "
         f"(= {seconds(ode_time)})")
    echo(f"  {runs} stochastic runs: {wrong} disagree with the ODE, P = {p:.3g} "
         f"(95% interval {low:.2g} .. {high:.2g})")
    echo(f"  stochastic consensus time: median {median:.3g} (= {seconds(median)}), "
         f"5-95% range {q05:.3g} .. {q95:.3g}")
    return dict(n=n, gap=gap, ode_label=label, ode_time=ode_time, runs=runs, wrong=wrong,
                p_wrong=p, low=low, high=high, ssa_median_time=median, ssa_q05=q05, ssa_q95=q95,
                concentration_molar=concentration), cell, times


def _trajectory_figure(cell, ode_time, seed, runs=5):
    from crn.plots.save import use_file_backend

    use_file_backend()
    import matplotlib.pyplot as plt

    from crn.solvers.ode import solve_mean_field
    from crn.solvers.simulate import simulate

    horizon = 2.5 * ode_time
    mean_field = solve_mean_field(cell, until=horizon, stop_at_consensus=False,
                                  times=np.linspace(0, horizon, 300))
    ensemble = simulate(cell, runs=runs, until=horizon, times=np.linspace(0, horizon, 300),
                        rng=seed, workers=1)
    fig, ax = plt.subplots(figsize=(7, 4.5), layout="constrained")
    n = cell.population
    colors = {"R": "tab:red", "S": "tab:blue", "B": "0.5"}
    for name, share in mean_field.fractions.items():
        ax.plot(mean_field.times, share, c=colors.get(name, "k"), lw=2.5, label=f"ODE {name}")
    for r in range(ensemble.runs):
        for s, name in enumerate(ensemble.species):
            ax.plot(ensemble.times, ensemble.counts[r, :, s] / n, c=colors.get(name, "k"),
                    lw=0.7, alpha=0.6, label=f"stochastic {name}" if r == 0 else None)
    ax.set_xlabel("parallel time (1 unit = 1 / (k C) seconds)")
    ax.set_ylabel("fraction of the strands")
    ax.set_title(f"ODE (thick) against {runs} stochastic runs (thin), n = {n:,}")
    ax.legend(fontsize=7, ncol=2)
    return fig


def run_demo(out, *, quick: bool = False, seed: int = 20261201, workers: int = 2,
             echo=print) -> dict:
    """Run the demo scenario and write its figures and tables to ``out``.

    Parameters
    ----------
    out : str or Path
    quick : bool
        Small settings (a larger gap and risk, few runs) for tests.
    seed : int
    workers : int
        Processes for the regime map.
    echo : callable
        Where the text goes.

    Returns
    -------
    dict
        The summary (also written to ``out/summary.json``).
    """
    from crn.plots.regimes import plot_feasibility, plot_regime_map
    from crn.plots.save import use_file_backend

    use_file_backend()

    started = time.perf_counter()
    report: list[str] = []
    echo = _recording(echo, report)
    s = SETTINGS["quick" if quick else "full"]
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    root = root_seed(seed)
    seeds = root.spawn(4)
    rate = parse_rate_constant(s["rate"])
    deadline_s = parse_time(s["deadline"])
    risk, fraction = s["risk"], s["gap_fraction"]
    model = load_model(MODEL)
    net = model.network

    echo(f"== {model.name} ==")
    echo(" ".join(model.about.split()))
    echo("\n== Translated reaction network (protocol rate 1 = "
         f"{s['rate']} in the droplet) ==")
    for reaction in net.reactions():
        echo(f"  {str(reaction):<16} k = {reaction.rate:g} x {rate:.0e} /M/s")

    compare, cell, _ = _compare(net, s["compare_n"], fraction, s["compare_runs"], seeds[0],
                                rate, parse_concentration("10nM"), echo)
    _figure_path(out, "ode_vs_stochastic.png",
                 _trajectory_figure(cell, compare["ode_time"], seeds[1]))

    echo(f"\n== Regime map: where the ODE's verdict is wrong more often than {risk:g} ==")
    rmap = regime_map(InitialSplit(net), s["map_n"], gap_fractions=s["map_fractions"],
                      risk=risk, runs_max=s["map_runs_max"], rng=seeds[2], workers=workers)
    cells = {(c.n, c.gap): c for c in rmap.cells}
    echo(f"  {'n':>7} " + " ".join(f"{f:>11.0%}" for f in s["map_fractions"])
         + "   (gap as a share of n)")
    for n in s["map_n"]:
        row = [cells[(n, gap_for_fraction(n, f))] for f in s["map_fractions"]]
        echo(f"  {n:>7} " + " ".join(f"{c.flag:>11}" for c in row))
    echo(f"  ({time.perf_counter() - started:.0f} s so far)")
    b = rmap.boundary
    theory = "; theory: sqrt(n) up to log factors (Angluin et al. 2008)"
    echo(f"  {b.describe()}" + (theory if b.exponent is not None else ""))
    ax = plot_regime_map(rmap, title=f"{model.name.split('(')[0].strip()}: regime map")
    _figure_path(out, "regime_map.png", ax.figure)
    write_atomic(out / "regime_map.csv", table_csv(rmap.cells))

    rows = _designers_question(net, s, seeds[3], echo)
    echo(f"  ({time.perf_counter() - started:.0f} s so far)")
    feasible = [r for r in rows if r["volume_liters"]]
    chosen = min(feasible, key=lambda r: r["volume_liters"]) if feasible else None
    ax = plot_feasibility(rows, chosen=chosen, risk=risk, deadline_hours=deadline_s / 3600,
                          note=WET_LAB_CAUTION)
    _figure_path(out, "feasibility.png", ax.figure)
    write_atomic(out / "feasibility.csv", _csv(rows, comment=f"caution: {WET_LAB_CAUTION}"))
    _verdict(rows, chosen, s, echo)
    dna = _dna(out, net, s, rate, deadline_s, quick, root, echo)
    elapsed = time.perf_counter() - started
    echo(f"\nFigures and tables in {out}/ (ode_vs_stochastic.png, regime_map.png, "
         f"feasibility.png, regime_map.csv, feasibility.csv, summary.json, report.html, "
         f"{REPORT}); {elapsed:.0f} s.")
    summary = {"seed": seed, "settings": "quick" if quick else "full", "risk": risk,
               "gap_fraction": fraction, "deadline_seconds": deadline_s,
               "rate_per_molar_second": rate, "loading": s["loading"], "compare": compare,
               "regimes": {"cells": rmap.table(), "exponent": b.to_dict()},
               "feasibility": rows, "chosen": chosen, "elapsed_seconds": elapsed,
               "caution": WET_LAB_CAUTION}
    summary["dna"] = dna
    summary["report"] = str(_write_report(out, model, rmap, chosen, summary, seeds[0]))
    write_atomic(out / "summary.json", json.dumps(to_jsonable(summary), indent=2) + "\n")
    write_atomic(out / REPORT, "\n".join(report) + "\n")
    return summary


def _recording(echo, lines: list):
    """``echo`` that also keeps each line, for the saved report."""
    def say(text=""):
        lines.append(str(text))
        echo(text)
    return say


def _designers_question(net, s, seed, echo) -> list[dict]:
    """The copies answer per concentration: smallest droplet deciding by the deadline."""
    rate, deadline_s = parse_rate_constant(s["rate"]), parse_time(s["deadline"])
    fraction, risk = s["gap_fraction"], s["risk"]
    poisson = s["loading"] == "poisson"
    echo(f"\n== Designer's question: {fraction:.0%} gap, risk {risk:g}, decided within "
         f"{format_time(deadline_s)} at {s['rate']} ==")
    if poisson:
        echo("  Droplets are Poisson-loaded: n is the mean number of strands per droplet; each "
             "strain's count varies from droplet to droplet, so a droplet sometimes holds the "
             "wrong majority.")
    echo("  n is the smallest mean copy number whose 95% upper bound on P(wrong) lies below "
         "the risk (the lattice n one step below does not qualify).")
    concentrations = [parse_concentration(c) for c in s["concentrations"]]
    horizon = to_parallel_time(deadline_s, rate, max(concentrations))
    prober = Prober(InitialSplit(net), horizon=horizon, runs_max=s["copies_runs_max"],
                    transient_max=s["transient_max"], rng=seed, loading=s["loading"],
                    scale_deadline=True)
    rows = []
    echo(f"  {'concentration':>13} {'deadline':>11} {'copies n (range)':>20} "
         f"{'P(wrong) [95% int.]':>22} {'droplet':>9} {'median':>7}")
    echo(f"  {'':>13} {'(par. time)':>11} {'':>20} {'':>22} {'volume':>9} {'time':>7}")
    for conc in concentrations:
        deadline = to_parallel_time(deadline_s, rate, conc)
        result = smallest_n(InitialSplit(net), gap_fraction=fraction, risk=risk,
                            deadline=deadline, prober=prober, n_max=200_000)
        rows.append(_feasibility_row(result, conc, deadline, rate))
        row = rows[-1]
        if result.estimate is None:
            echo(f"  {format_concentration(conc):>13} {deadline:>11.3g}   too slow: no droplet "
                 f"size decides by the deadline")
            continue
        span = f"{result.estimate:,} ({_n(result.low)}..)"
        wrong = f"{row['p_wrong']:.2g} [{row['p_wrong_low']:.2g}, {row['p_wrong_high']:.2g}]"
        hours = "-" if row["median_hours"] is None else f"{row['median_hours']:.2f} h"
        echo(f"  {format_concentration(conc):>13} {deadline:>11.3g} {span:>20} {wrong:>22} "
             f"{format_volume(row['volume_liters']):>9} {hours:>7}")
    echo("  (range: the smallest n could be as low as the second number, allowing for "
         "sampling error)")
    return rows


def _feasibility_row(result, conc, deadline, rate) -> dict:
    """One row of feasibility.csv (SI units; None where there is no answer)."""
    row = dict(concentration_molar=conc, deadline_parallel=deadline, copies=result.estimate,
               copies_low=result.low, copies_high=result.high, copies_below=result.below,
               volume_liters=None, volume_low_liters=None, volume_high_liters=None,
               median_hours=None, p_wrong=None, p_wrong_low=None, p_wrong_high=None,
               p_wrong_runs=None, risk_loading=None, risk_kinetics=None, loading_reversal=None,
               loading=result.loading, method=result.method)
    if result.estimate is None:
        return row
    row["volume_liters"] = volume_for(result.estimate, conc)
    row["volume_low_liters"] = None if result.low is None else volume_for(result.low, conc)
    row["volume_high_liters"] = volume_for(result.high, conc)
    if result.median_time is not None:
        row["median_hours"] = to_seconds(result.median_time, rate, conc) / 3600
    at = result.at_estimate
    row["p_wrong"], row["p_wrong_low"], row["p_wrong_high"] = at.p_wrong
    row["p_wrong_runs"] = at.trials
    if at.loading == "poisson":
        row["risk_loading"], row["risk_kinetics"] = at.wrong_loading, at.wrong_kinetics
        row["loading_reversal"] = at.reversal
    return row


def _verdict(rows, chosen, s, echo) -> None:
    fraction, risk = s["gap_fraction"], s["risk"]
    deadline_s = parse_time(s["deadline"])
    feasible = [r for r in rows if r["volume_liters"]]
    slowest = min(feasible, key=lambda r: r["concentration_molar"]) if feasible else None
    echo("\n== Verdict ==")
    if chosen is None:
        echo(f"  No concentration up to {s['concentrations'][-1]} decides a {fraction:.0%} gap "
             f"at risk {risk:g} within {format_time(deadline_s)}.")
    else:
        conc = chosen["concentration_molar"]
        mean = " on average" if chosen["loading"] == "poisson" else ""
        echo(f"  Smallest droplet: {format_volume(chosen['volume_liters'])} at "
             f"{format_concentration(conc)} total signature strand "
             f"({chosen['copies']:,} copies per droplet{mean}; P(wrong) "
             f"{chosen['p_wrong']:.2g}, 95% interval {chosen['p_wrong_low']:.2g} .. "
             f"{chosen['p_wrong_high']:.2g}, below the risk {risk:g}).")
        if chosen["risk_loading"] is not None:
            echo(f"  By cause: about {chosen['risk_loading']:.2g} from droplets loaded with "
                 f"the wrong or a tied majority (P = {chosen['loading_reversal']:.2g}) and "
                 f"about {chosen['risk_kinetics']:.2g} from the kinetics.")
        if chosen["median_hours"] is not None:
            echo(f"  It decides in about {chosen['median_hours']:.2f} h (median), within the "
                 f"{format_time(deadline_s)} deadline with probability >= {1 - risk:g}.")
        if slowest is not None and slowest is not chosen:
            echo(f"  The lowest concentration that still meets the deadline is "
                 f"{format_concentration(slowest['concentration_molar'])}, needing "
                 f"{format_volume(slowest['volume_liters'])} droplets ({slowest['copies']:,} "
                 f"copies, about {slowest['median_hours']:.2f} h).")
        infeasible = [r for r in rows if not r["volume_liters"]]
        if infeasible:
            echo("  Below " + format_concentration(min(r["concentration_molar"]
                                                       for r in feasible))
                 + " the reactions are too slow to decide in time at any droplet size.")
    echo(f"  {WET_LAB_CAUTION}")


def _write_report(out: Path, model, rmap, chosen, summary, seed) -> Path:
    """``out/report.html``: the demo's page, reusing its regime map and copies answer."""
    from crn.report import ReportSettings, collect_report, render_report

    copies = None
    if chosen is not None:
        copies = {"n": {"estimate": chosen["copies"], "low": chosen["copies_low"],
                        "high": chosen["copies_high"]},
                  "gap": gap_for_fraction(chosen["copies"], summary["gap_fraction"]),
                  "risk": summary["risk"], "deadline_seconds": summary["deadline_seconds"],
                  "concentration_molar": chosen["concentration_molar"],
                  "volume_liters": chosen["volume_liters"],
                  "seconds": (None if chosen["median_hours"] is None
                              else chosen["median_hours"] * 3600),
                  "median_time": None, "method": chosen["method"],
                  "p_wrong": {"estimate": chosen["p_wrong"], "low": chosen["p_wrong_low"],
                              "high": chosen["p_wrong_high"], "runs": chosen["p_wrong_runs"],
                              "method": chosen["method"]}}
    data = collect_report(model, model_text=MODEL.read_text(encoding="utf-8"),
                          model_file=MODEL.name,
                          settings=ReportSettings(runs=100, seed=int(seed.generate_state(1)[0])),
                          saved={"regimes": rmap, **({"copies": copies} if copies else {})})
    path = out / "report.html"
    write_atomic(path, render_report(data, command_line="make demo"))
    return path


def _dna(out, net, s, rate, deadline_s, quick, root, echo) -> dict:
    """The DNA-implementation section (crn.demo_dna): fuel, leak, copies on the circuit."""
    from crn.demo_dna import dna_section

    gap = gap_for_fraction(s["compare_n"], s["gap_fraction"])
    return dna_section(out, net, n=s["compare_n"], gap=gap, rate=rate,
                       deadline_seconds=deadline_s, quick=quick,
                       seed=root.spawn(1)[0], echo=echo)


def _n(value):
    return "-" if value is None else f"{value:,}"


def _vol(value):
    return "-" if value is None else format_volume(value)


def _csv(rows, comment: str | None = None) -> str:
    keys = list(rows[0]) if rows else []
    lines = [] if comment is None else [f"# {comment}"]
    lines.append(",".join(keys))
    for r in rows:
        lines.append(",".join("" if r[k] is None else str(r[k]) for k in keys))
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    """Run the demo (``python -m crn.demo``); return the exit status."""
    import argparse

    parser = argparse.ArgumentParser(prog="python -m crn.demo", description=__doc__.split("\n")[0])
    parser.add_argument("--out", default="out", help="directory for figures and tables")
    parser.add_argument("--quick", action="store_true", help="small, fast settings (tests)")
    parser.add_argument("--seed", type=int, default=20261201)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)
    run_demo(args.out, quick=args.quick, seed=args.seed, workers=args.workers)
    return 0


if __name__ == "__main__":
    sys.exit(main())
