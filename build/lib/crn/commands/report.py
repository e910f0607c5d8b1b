"""``crn report``: one self-contained HTML page of every analysis of a model."""

from __future__ import annotations

import json
import shlex
import sys
from pathlib import Path

import click

from crn.commands.options import (
    OUTPUT_FILE,
    build_implementation,
    dna_options,
    dna_parameters,
    emit_json,
    json_option,
    model_argument,
    progress_bar,
    seed_option,
    set_option,
)
from crn.core.errors import CRNError

__all__ = ["report", "read_saved"]


def read_saved(folder) -> dict:
    """The saved command results in ``folder`` (``regimes.json``, ``copies.json``), by name.

    Parameters
    ----------
    folder : str or Path

    Returns
    -------
    dict of str to dict

    Raises
    ------
    CRNError
        When the folder does not exist or a results file is not a JSON object.
    """
    from crn.report import SAVED_NAMES

    folder = Path(folder)
    if not folder.is_dir():
        raise CRNError(f"--from: {str(folder)!r} is not a folder")
    saved = {}
    for name in SAVED_NAMES:
        path = folder / f"{name}.json"
        if not path.exists():
            continue
        try:
            obj = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
            raise CRNError(f"{path}: not a readable JSON results file ({err})") from err
        if not isinstance(obj, dict):
            raise CRNError(f"{path}: expected a JSON object")
        saved[name] = obj
    return saved


def _floats(text, what):
    from crn.commands.regimes import parse_float_list

    return tuple(parse_float_list(text, what)) if text else ()


def _ints(text, what):
    from crn.commands.regimes import parse_int_list

    return tuple(parse_int_list(text, what)) if text else ()


@click.command("report")
@model_argument
@set_option
@click.option("-o", "--output", "output", type=OUTPUT_FILE, default="report.html",
              show_default=True, help="The HTML file to write.")
@click.option("--from", "from_dir", type=click.Path(file_okay=False), default=None,
              metavar="DIR", help="Reuse results saved there (regimes.json from `crn regimes "
                                  "--out DIR`, copies.json from `crn copies --json`) instead "
                                  "of recomputing them.")
@click.option("--runs", type=click.IntRange(min=0), default=200, show_default=True,
              help="Stochastic runs for the time courses and outcome table (0: none).")
@click.option("--regime-n", default="100,300,1000", show_default=True, metavar="LIST",
              help="Populations of the regime map (empty: no regime map).")
@click.option("--regime-gap-fraction", default="0.02,0.05,0.1,0.2", show_default=True,
              metavar="LIST", help="Gap fractions of the regime map.")
@click.option("--regime-runs-max", type=click.IntRange(min=1), default=200, show_default=True,
              help="Most stochastic runs per regime cell.")
@click.option("--risk", type=click.FloatRange(0, 1, min_open=True, max_open=True), default=0.01,
              show_default=True, help="Acceptable probability of a wrong decision.")
@click.option("--gap-fraction", type=click.FloatRange(0, 1, min_open=True, max_open=True),
              default=None, help="Gap (share of n) of the copies answer; without it, no "
                                 "copies section unless saved.")
@click.option("--deadline", default=None, metavar="TIME",
              help="Deadline of the copies answer, e.g. 2h (needs --rate and --concentration).")
@click.option("--rate", default=None, metavar="RATE",
              help="Bimolecular rate constant one unit of protocol rate stands for, e.g. 1e6/M/s.")
@click.option("--concentration", default=None, metavar="CONC",
              help="Total strand concentration of the copies answer, e.g. 10nM.")
@click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True,
              help="Processes for the regime map.")
@click.option("--implement", "scheme", type=click.Choice(["ssw", "two-domain"]), default=None,
              help="Also show the DNA strand-displacement implementation (with the options "
                   "below, --rate and --concentration) with its fuel and leak.")
@dna_options(scale=False)
@seed_option
@json_option
def report(model, sets, output, from_dir, runs, regime_n, regime_gap_fraction, regime_runs_max,
           risk, gap_fraction, deadline, rate, concentration, workers, scheme, fuel, max_rate,
           toehold, leak, seed, as_json):
    """Write one self-contained HTML page on MODEL: the model as written, its reaction network,
    mean field with fixed points, stochastic runs with bands next to the ODE, exact results
    when small, the regime map, the copies answer, cautions and the commands that reproduce
    every number. Figures are embedded as SVG; the page needs no network and no scripts."""
    from crn.commands.regimes import cell_networks
    from crn.core.units import parse_concentration, parse_rate_constant, parse_time
    from crn.io.atomic import write_atomic
    from crn.report import ReportSettings, collect_report, render_report

    saved = read_saved(from_dir) if from_dir else {}
    settings = ReportSettings(
        runs=runs, seed=seed, regime_n=_ints(regime_n, "--regime-n"),
        regime_gap_fractions=_floats(regime_gap_fraction, "--regime-gap-fraction"),
        regime_runs_max=regime_runs_max, risk=risk, gap_fraction=gap_fraction,
        deadline_seconds=None if deadline is None else parse_time(deadline),
        rate=None if rate is None else parse_rate_constant(rate),
        concentration_molar=None if concentration is None else parse_concentration(concentration),
        workers=workers)
    if settings.deadline_seconds is not None and (settings.rate is None
                                                  or settings.concentration_molar is None):
        raise CRNError("--deadline needs --rate and --concentration (to convert it into "
                       "parallel time)")
    loaded, networks = cell_networks(model, sets)
    implementation = None
    if scheme is not None:
        params = dna_parameters(rate=rate, concentration=concentration, fuel=fuel,
                                max_rate=max_rate, toehold=toehold, leak=leak)
        implementation = build_implementation(loaded.network, scheme, params,
                                              option="--implement")
    try:
        text = Path(model).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise CRNError(f"{model}: cannot read the model file ({err})") from err
    if seed is None and not as_json:
        click.echo("crn: fresh seed drawn; the report's reproduce box records it", err=True)
    started = []
    with progress_bar("analyses", 5, enabled=not as_json) as update:
        def step(name):
            update(len(started))
            started.append(name)

        data = collect_report(loaded, model_text=text, model_file=Path(model).name,
                              sets=sets or (), networks=networks, settings=settings,
                              saved=saved, implementation=implementation, progress=step)
    line = " ".join(shlex.quote(a) for a in ["crn", *sys.argv[1:]]) \
        if Path(sys.argv[0]).name in ("crn", "__main__.py") else ""
    html = render_report(data, command_line=line)
    write_atomic(output, html)
    if as_json:
        from crn.report import SECTIONS

        emit_json({"path": str(Path(output).resolve()),
                   "sections": [sid for sid, _ in SECTIONS]})
        return
    click.echo(f"report written to {output}")
