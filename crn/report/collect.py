"""Run (or reuse) every analysis of one model and keep what the report shows.

:func:`collect_report` is pure computation: it takes a loaded model, the model
file's text and the report's settings, and returns a :class:`ReportData` of
plain values and library result objects. Results other commands saved (their
``--json`` objects, and the regime map written by ``crn regimes --out DIR``)
are used instead of recomputing when they are passed in ``saved``.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from crn.core.errors import CRNError

__all__ = ["ReportSettings", "ReportData", "collect_report", "SAVED_NAMES"]

#: The saved results ``crn report --from DIR`` looks for, as ``DIR/<name>.json``.
SAVED_NAMES = ("regimes", "copies")

#: Populations up to which the exact chain is attempted (configurations grow like n^(states-1)).
_EXACT_STATES_MAX = 200_000


@dataclass(frozen=True)
class ReportSettings:
    """What the report computes.

    Attributes
    ----------
    runs : int
        Stochastic runs for the time courses and outcome table.
    seed : int or None
        Root seed; each section gets its own child stream. None draws fresh entropy.
    regime_n : tuple of int
        Populations of the regime map (empty: no regime map unless saved).
    regime_gap_fractions : tuple of float
        Gap fractions of the regime map.
    regime_runs_max : int
    risk : float
        Acceptable probability of a wrong decision (regime flags and copies).
    gap_fraction : float or None
        The gap the copies answer is for (None: no copies section unless saved).
    deadline_seconds : float or None
    rate : float or None
        Bimolecular rate constant in /M/s that one unit of protocol rate stands for.
    concentration_molar : float or None
        Total strand concentration of the copies answer.
    copies_runs_max : int
    workers : int
        Local processes for the regime map.
    """

    runs: int = 200
    seed: int | None = None
    regime_n: tuple = ()
    regime_gap_fractions: tuple = ()
    regime_runs_max: int = 300
    risk: float = 0.01
    gap_fraction: float | None = None
    deadline_seconds: float | None = None
    rate: float | None = None
    concentration_molar: float | None = None
    copies_runs_max: int = 2000
    workers: int = 1


@dataclass
class ReportData:
    """Everything the report shows, section by section (None: the section has nothing)."""

    model: Any
    model_text: str
    model_file: str
    model_sha256: str
    settings: ReportSettings
    sets: tuple
    seed_entropy: int
    mean_field: Any = None
    mean_field_consensus: Any = None
    fixed_points: list | None = None
    ensemble: Any = None
    ensemble_ode: Any = None
    disagreement: tuple | None = None
    exact: Any = None
    exact_note: str = ""
    implementation: Any = None
    fuel_budget: Any = None
    fuel_inventory: Any = None
    regimes: Any = None
    regimes_source: str = ""
    copies: dict | None = None
    copies_source: str = ""
    commands: list = field(default_factory=list)
    notes: list = field(default_factory=list)


def collect_report(model, *, model_text: str, model_file: str, sets=(), networks=None,
                   settings: ReportSettings | None = None, saved: dict | None = None,
                   implementation=None, progress=None) -> ReportData:
    """Run the analyses a report shows.

    Parameters
    ----------
    model : crn.core.model.Model
        The loaded model (with ``--set`` overrides applied).
    model_text : str
        The model file as written (shown verbatim and hashed).
    model_file : str
        Its name, for the reproduce box.
    sets : sequence of str
        The ``NAME=VALUE`` overrides, for the reproduce box.
    networks : callable (n, gap) -> Network, optional
        Cell builder for the regime map and the copies search; without it those
        sections are taken from ``saved`` or left out.
    settings : ReportSettings, optional
    saved : dict, optional
        Results already at hand, used instead of recomputing: ``"regimes"`` (a
        :class:`~crn.analyses.regimes.RegimeMap` or the ``crn regimes --json`` object) and
        ``"copies"`` (the ``crn copies --json`` object).
    implementation : crn.dna.Implementation, optional
        The DNA implementation of the model's network, shown beside the formal
        network with its fuel budget.
    progress : callable(str), optional
        Called with the name of each analysis as it starts.

    Returns
    -------
    ReportData
    """
    from crn.analyses.compare import compare_runs, mean_field_window
    from crn.runtime.seeds import root_seed
    from crn.solvers.simulate import simulate

    settings = settings or ReportSettings()
    saved = saved or {}
    step = progress or (lambda name: None)
    root = root_seed(settings.seed)
    # integer seeds, so that the commands in the reproduce box give the same numbers
    seeds = [_entropy(child) for child in root.spawn(3)]
    net = model.network
    data = ReportData(model=model, model_text=model_text, model_file=model_file,
                      model_sha256=hashlib.sha256(model_text.encode("utf-8")).hexdigest(),
                      settings=settings, sets=tuple(sets), seed_entropy=int(root.entropy))
    base = ["crn", "{cmd}", model_file, *[f"--set {s}" for s in sets]]
    if implementation is not None:
        from crn.dna.budget import decision_fuel, inventory

        step("DNA implementation")
        data.implementation = implementation
        data.fuel_budget = decision_fuel(implementation)
        data.fuel_inventory = inventory(implementation)

    def command(name, *extra):
        data.commands.append(" ".join(base).replace("{cmd}", name) + "".join(
            f" {e}" for e in extra))

    step("mean field")
    window = mean_field_window(net)
    data.mean_field = window.ode
    data.mean_field_consensus = window.consensus
    data.fixed_points = _fixed_points(net, data)
    command("ode", "--json")

    if settings.runs > 0 and net.n_reactions:
        step("stochastic runs")
        data.ensemble = simulate(net, runs=settings.runs, until=window.horizon,
                                 times=window.times, rng=seeds[0], workers=1)
        data.disagreement = compare_runs(window, data.ensemble).disagreement
        command("compare", f"--runs {settings.runs}", f"--seed {seeds[0]}")

    step("exact analysis")
    data.exact, data.exact_note = _exact(net)
    if data.exact is not None:
        command("exact", "--json")

    if "regimes" in saved:
        data.regimes, data.regimes_source = _as_regime_map(saved["regimes"]), "saved"
    elif networks is not None and settings.regime_n and settings.regime_gap_fractions \
            and net.majority is not None:
        from crn.analyses.regimes import regime_map

        step("regime map")
        data.regimes = regime_map(networks, list(settings.regime_n),
                                  gap_fractions=list(settings.regime_gap_fractions),
                                  risk=settings.risk, runs_max=settings.regime_runs_max,
                                  rng=seeds[1], workers=settings.workers)
        data.regimes_source = "computed"
        command("regimes", "--n " + ",".join(str(n) for n in settings.regime_n),
                "--gap-fractions " + ",".join(f"{f:g}" for f in settings.regime_gap_fractions),
                f"--risk {settings.risk:g}", f"--runs-max {settings.regime_runs_max}",
                f"--seed {seeds[1]}")

    if "copies" in saved:
        data.copies, data.copies_source = saved["copies"], "saved"
    elif networks is not None and settings.gap_fraction is not None \
            and net.majority is not None:
        step("copies")
        data.copies = _copies(networks, settings, seeds[2])
        data.copies_source = "computed"
        extra = [f"--gap-fraction {settings.gap_fraction:g}", f"--risk {settings.risk:g}"]
        if settings.deadline_seconds is not None:
            extra.append(f"--deadline {settings.deadline_seconds:g}s")
        if settings.rate is not None:
            extra.append(f"--rate {settings.rate:g}/M/s")
        if settings.concentration_molar is not None:
            extra.append(f"--concentration {settings.concentration_molar:g}M")
        command("copies", *extra, f"--seed {seeds[2]}", "--json")
    return data


def _entropy(seed_sequence) -> int:
    """An integer seed drawn from a child sequence (deterministic in the report's seed)."""
    return int(seed_sequence.generate_state(1, dtype=np.uint32)[0])


def _fixed_points(net, data):
    from crn.solvers.fixed_points import find_fixed_points

    try:
        return find_fixed_points(net)
    except CRNError as err:  # e.g. too large for the exact search: say so, keep going
        data.notes.append(f"fixed points not computed: {err}")
        return None


def _exact(net):
    from crn.solvers.exact import exact_outcomes

    if net.majority is None:
        return None, "the model asks no majority question"
    n = net.population
    estimate = math.comb(n + net.n_species - 1, net.n_species - 1)
    if estimate > _EXACT_STATES_MAX:
        return None, (f"population n = {n:,} has up to {estimate:.3g} configurations "
                      f"(more than {_EXACT_STATES_MAX:,}); run `crn exact` at a smaller n")
    try:
        return exact_outcomes(net, max_states=_EXACT_STATES_MAX), ""
    except CRNError as err:
        return None, str(err)


def _copies(networks, settings, seed) -> dict:
    from crn.analyses.copies import (
        p_wrong_summary,
        parallel_deadline,
        physical_outputs,
        smallest_n,
    )

    deadline = None
    if settings.deadline_seconds is not None:
        if settings.rate is None or settings.concentration_molar is None:
            raise CRNError("a deadline in seconds needs --rate and --concentration")
        deadline = parallel_deadline(settings.deadline_seconds, settings.rate,
                                     concentration_molar=settings.concentration_molar)
    result = smallest_n(networks, gap_fraction=settings.gap_fraction, risk=settings.risk,
                        deadline=deadline, runs_max=settings.copies_runs_max,
                        rng=seed)
    phys = physical_outputs(result.estimate, concentration_molar=settings.concentration_molar,
                            rate=settings.rate, parallel_time=result.median_time)
    return {"n": {"estimate": result.estimate, "low": result.low, "high": result.high},
            "gap": result.gap_estimate, "risk": settings.risk, "deadline": result.deadline,
            "deadline_seconds": settings.deadline_seconds, "median_time": result.median_time,
            "method": result.method, "seed": result.seed_entropy,
            "bracket": {"passes": result.estimate, "fails": result.below},
            "p_wrong": p_wrong_summary(result.at_estimate), **phys}



def _as_regime_map(obj):
    """A :class:`~crn.analyses.regimes.RegimeMap` from itself or from ``regimes.json``.

    ``regimes.json`` is what ``crn regimes --out`` saves.
    """
    from crn.analyses.regimes import Boundary, RegimeCell, RegimeMap

    if isinstance(obj, RegimeMap):
        return obj
    try:
        cells = tuple(RegimeCell.from_dict(c) for c in obj["cells"])
        b = obj.get("boundary") or {}
        boundary = Boundary(
            exponent=b.get("estimate"), low=b.get("low"), high=b.get("high"),
            prefactor=b.get("prefactor"),
            critical_gaps=tuple((c["n"], c["gap"]) for c in b.get("critical_gaps", ())),
            grid_low=b.get("grid_low"), grid_high=b.get("grid_high"), note=b.get("note") or "")
        return RegimeMap(cells=cells, boundary=boundary, risk=float(obj["risk"]),
                         time_factor=float(obj.get("time_factor", 2.0)),
                         seed_entropy=int(obj.get("seed") or 0),
                         merged=tuple(obj.get("merged") or ()))
    except (KeyError, TypeError, ValueError) as err:
        raise CRNError(f"regimes.json: not a saved regime map ({err})") from err
