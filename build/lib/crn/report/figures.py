"""Figures of a report, drawn by :mod:`crn.plots` in the house style and embedded as SVG."""

from __future__ import annotations

import base64
import io
from dataclasses import dataclass

__all__ = ["Figure", "report_figures"]


@dataclass(frozen=True)
class Figure:
    """One embedded figure: an SVG data URI, its alternative text and its caption."""

    key: str
    uri: str
    alt: str
    caption: str


def _svg_uri(figure) -> str:
    import matplotlib.pyplot as plt

    buffer = io.BytesIO()
    try:
        figure.savefig(buffer, format="svg", metadata={"Date": None})
    finally:
        plt.close(figure)
    return "data:image/svg+xml;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def report_figures(data) -> dict[str, Figure]:
    """Draw every figure the report's data allows.

    Parameters
    ----------
    data : crn.report.collect.ReportData

    Returns
    -------
    dict of str to Figure
        Keyed ``"mean_field"``, ``"compare"``, ``"regimes"`` (present when drawn).
    """
    import matplotlib

    matplotlib.use("Agg")
    from crn.plots.compare import plot_compare
    from crn.plots.ode import plot_mean_field
    from crn.plots.regimes import plot_regime_map
    from crn.plots.style import house_style

    name = data.model.name
    out = {}
    with house_style():
        if data.mean_field is not None:
            ax = plot_mean_field(data.mean_field, title=f"{name}: mean field")
            out["mean_field"] = Figure(
                "mean_field", _svg_uri(ax.figure),
                alt=f"Line chart: share of each species of {name} against time in the "
                    "mean-field ODE.",
                caption="Mean-field ODE: each species' share of the population against time "
                        "(parallel time for protocols). The dashed line marks the ODE's "
                        "consensus, when it reaches one.")
        if data.ensemble is not None and data.ensemble.runs:
            ax = plot_compare(data.mean_field, data.ensemble,
                              disagreement=data.disagreement,
                              title=f"{name}: mean field vs {data.ensemble.runs} "
                                    "stochastic runs")
            out["compare"] = Figure(
                "compare", _svg_uri(ax.figure),
                alt="Line chart with shaded bands: the ODE's species shares (solid) over the "
                    "stochastic runs' mean (dashed) and 5-95% band (shaded).",
                caption=f"Mean field (solid lines) against {data.ensemble.runs} exact "
                        f"stochastic runs ({data.ensemble.engine} engine): dashed lines are "
                        "the runs' mean share of each species, shaded bands hold 90% of the "
                        "runs (5% to 95% quantiles) at each time.")
        if data.regimes is not None and any(c.gap > 0 for c in data.regimes.cells):
            ax = plot_regime_map(data.regimes, title=f"{name}: where the mean field misleads")
            out["regimes"] = Figure(
                "regimes", _svg_uri(ax.figure),
                alt="Scatter heat map over population n and gap (log-log): colour gives the "
                    "probability that a stochastic run disagrees with the ODE, markers give "
                    "the flag.",
                caption="Regime map: each square is one (n, gap) cell, coloured by the "
                        "probability that a stochastic run disagrees with the mean field's "
                        f"label (risk {data.regimes.risk:g}); the marker inside is the flag "
                        "(cross misleading, circle uncertain, square ok), diamonds are "
                        "interpolated critical gaps and the dashed line their fitted growth.")
    return out
