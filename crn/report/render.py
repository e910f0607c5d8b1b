"""Turn a report's data into one self-contained HTML page (Jinja2 template, SVG figures)."""

from __future__ import annotations

import datetime as _dt
import importlib.metadata
import math
import platform

from crn.report.figures import report_figures

__all__ = ["render_report", "SECTIONS", "CAUTION"]

#: The wet-lab caution, shown in the header and beside every wet-lab number.
CAUTION = ("Copies, concentrations, volumes and times are predictions of a mathematical model, "
           "not measurements: validate them in your own laboratory and follow its validation "
           "and safety practice before relying on them.")

#: Section ids in page order, with their headings.
SECTIONS = (
    ("model", "The model as written"),
    ("network", "Reaction network"),
    ("mean-field", "Mean field"),
    ("stochastic", "Stochastic dynamics"),
    ("exact", "Exact results"),
    ("regimes", "Where the mean field misleads"),
    ("copies", "Copies, concentration, volume, time"),
    ("cautions", "Cautions"),
    ("reproduce", "Reproduce"),
)

_PACKAGES = ("crn", "numpy", "scipy", "numba", "sympy", "matplotlib", "jinja2")


def _g(x, spec=".4g"):
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    return format(x, spec)


def _versions() -> list[tuple[str, str]]:
    out = [("python", platform.python_version())]
    for name in _PACKAGES:
        try:
            out.append((name, importlib.metadata.version(name)))
        except importlib.metadata.PackageNotFoundError:
            out.append((name, "not installed"))
    return out


def _network_rows(net):
    return [{"reactants": r.split(" -> ")[0], "products": r.split(" -> ")[1],
             "rate": _g(net.rates[i])} for i, r in enumerate(str(x) for x in net.reactions())]


def _fixed_point_rows(points, species):
    rows = []
    for p in points or ():
        coords = ", ".join(f"{s} = {'free' if math.isnan(v) else _g(max(float(v), 0.0), '.4g')}"
                           for s, v in zip(species, p.point, strict=True))
        if p.classification == "non-isolated":
            kind = "a continuum of fixed points (free coordinates vary along it)"
        else:
            kind = p.classification
        note = (f"consensus on {p.consensus}" if p.consensus else "") + ("tie" if p.tie else "")
        values = ", ".join(_complex(z) for z in p.eigenvalues) or "-"
        rows.append({"point": coords, "kind": kind, "note": note or "-", "eigenvalues": values})
    return rows


def _complex(z) -> str:
    z = complex(z)
    if abs(z.imag) < 1e-9 * max(1.0, abs(z.real)):
        return _g(z.real, ".3g")
    return f"{z.real:.3g}{z.imag:+.3g}i"


def _implementation_view(data):
    impl = data.implementation
    if impl is None:
        return None
    from crn.core.units import format_concentration
    from crn.io.implementation import implementation_to_text

    roles = {}
    for species, role in impl.roles.items():
        roles.setdefault(role, []).append(species)
    return {"scheme": impl.scheme,
            "text": implementation_to_text(impl, data.fuel_budget, data.fuel_inventory),
            "species": impl.network.n_species, "reactions": impl.network.n_reactions,
            "roles": [{"role": r, "count": len(v), "names": ", ".join(v)}
                      for r, v in sorted(roles.items())],
            "fuel": [{"species": s, "concentration": format_concentration(c)}
                     for s, c in impl.fuel.items()],
            "leak": _g(impl.params.leak)}


def _outcome_rows(ensemble, labels):
    from crn.core.stats import wilson_interval

    intervals = ensemble.outcome_intervals()
    rows = []
    for label in [*labels, "none"]:
        row = intervals.get(label)
        if row is None:  # a label of the model no run could report
            p, low, high = wilson_interval(0, ensemble.runs)
            row = {"runs": 0, "p": p, "low": low, "high": high}
        rows.append({"label": label, "runs": row["runs"], "p": _g(row["p"]),
                     "low": _g(row["low"]), "high": _g(row["high"])})
    return rows


def _regime_rows(rmap):
    return [{"n": f"{c.n:,}", "gap": f"{c.gap:,}", "ode": c.ode_label or "-",
             "ode_time": _g(c.ode_time), "p": _g(c.p_wrong), "low": _g(c.low, ".3g"),
             "high": _g(c.high, ".3g"), "runs": c.runs, "flag": c.flag,
             "ssa_time": _g(c.ssa_median_time), "time_flag": c.time_flag, "method": c.how}
            for c in rmap.cells]


def _copies_view(copies):
    if copies is None:
        return None
    from crn.core.units import format_concentration, format_time, format_volume

    n = copies.get("n") or {}
    conc, vol, sec = (copies.get(k) for k in ("concentration_molar", "volume_liters",
                                              "seconds"))
    return {
        "n": n.get("estimate"), "low": n.get("low"), "high": n.get("high"),
        "gap": copies.get("gap"), "risk": copies.get("risk"),
        "concentration": None if conc is None else format_concentration(conc),
        "volume": None if vol is None else format_volume(vol),
        "time": None if sec is None else format_time(sec),
        "deadline": (None if copies.get("deadline_seconds") is None
                     else format_time(copies["deadline_seconds"])),
        "median_time": _g(copies.get("median_time")),
        "method": copies.get("method") or "-",
        "p_wrong": _p_wrong_text(copies.get("p_wrong")),
        "fails": (copies.get("bracket") or {}).get("fails"),
    }


def _p_wrong_text(p):
    if not p:
        return None
    if p.get("method") == "exact":
        return f"{_g(p['estimate'], '.3g')} (exact)"
    return (f"{_g(p['estimate'], '.3g')} (95% interval {_g(p['low'], '.3g')} to "
            f"{_g(p['high'], '.3g')}, {p.get('runs') or 0:,} runs)")


def render_report(data, *, command_line: str = "", created: str | None = None) -> str:
    """The report page of ``data`` as one HTML string.

    Parameters
    ----------
    data : crn.report.collect.ReportData
    command_line : str
        The ``crn report`` command that made it, for the reproduce box.
    created : str, optional
        Creation time shown in the header (default: now, UTC, to the minute).

    Returns
    -------
    str
        A complete HTML5 document with figures embedded as SVG data and no scripts.
    """
    import jinja2

    from crn.io.text import network_to_text

    env = jinja2.Environment(loader=jinja2.PackageLoader("crn.report", "templates"),
                             autoescape=jinja2.select_autoescape(["html", "j2"]),
                             trim_blocks=True, lstrip_blocks=True,
                             undefined=jinja2.StrictUndefined)
    net = data.model.network
    labels = list(net.labels)
    consensus = data.mean_field_consensus
    ensemble = data.ensemble
    summary = None if ensemble is None else ensemble.consensus_time_summary()
    exact = data.exact
    context = {
        "title": data.model.name,
        "about": " ".join((data.model.about or "").split()),
        "created": created or _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "caution": CAUTION,
        "sections": SECTIONS,
        "model_text": data.model_text,
        "model_file": data.model_file,
        "overrides": list(data.sets),
        "network_text": network_to_text(net),
        "network_rows": _network_rows(net),
        "implementation": _implementation_view(data),
        "species": list(net.species),
        "initial": {s: int(x) for s, x in zip(net.species, net.initial, strict=True)},
        "volume": _g(net.volume),
        "from_protocol": net.from_protocol,
        "figures": report_figures(data),
        "ode_consensus": (None if consensus is None or consensus.label is None
                          else {"label": consensus.label, "time": _g(consensus.time)}),
        "fixed_points": _fixed_point_rows(data.fixed_points, net.species),
        "ensemble": None if ensemble is None else {
            "runs": ensemble.runs, "engine": ensemble.engine,
            "outcomes": _outcome_rows(ensemble, labels),
            "times": None if summary is None else {k: _g(v) for k, v in summary.items()},
            "disagreement": None if data.disagreement is None
            else [_g(x) for x in data.disagreement]},
        "exact": None if exact is None else {
            "states": f"{exact.states:,}",
            "rows": [{"label": k, "p": _g(v, ".6g")} for k, v in exact.probabilities.items()],
            "expected_time": _g(exact.expected_time), "time_std": _g(exact.time_std),
            "correct": exact.correct or "-"},
        "exact_note": data.exact_note,
        "regimes": None if data.regimes is None else {
            "rows": _regime_rows(data.regimes), "risk": data.regimes.risk,
            "source": data.regimes_source, "boundary": data.regimes.boundary},
        "copies": _copies_view(data.copies),
        "copies_source": data.copies_source,
        "notes": data.notes,
        "reproduce": {
            "command_line": command_line, "commands": data.commands,
            "seed": data.seed_entropy, "sha256": data.model_sha256,
            "versions": _versions()},
        "g": _g,
    }
    return env.get_template("report.html.j2").render(**context)
