"""Figures of regime maps (where the mean field misleads) and of droplet feasibility."""

from __future__ import annotations

import math

from crn.plots.axes import axes_for
from crn.plots.style import PALETTE, SEQUENTIAL_MAP

__all__ = ["plot_regime_map", "plot_feasibility"]

_FLAG_STYLE = {
    "misleading": ("X", "misleading (P(disagree) surely above risk)"),
    "uncertain": ("o", "uncertain (interval straddles risk)"),
    "ok": ("s", "ok (P(disagree) surely below risk)"),
}


def plot_regime_map(regime_map, *, ax=None, title: str | None = None):
    """Heatmap of the disagreement probability over n and gap, flags marked, boundary drawn.

    Each cell is a square at (n, gap) on log-log axes coloured by the
    probability that a stochastic run disagrees with the ODE's label; the
    marker inside gives the flag, a ring marks a time flag, and the dashed
    line is the fitted boundary ``gap_c = a n**b`` through the interpolated
    critical gaps (diamonds).

    Parameters
    ----------
    regime_map : crn.analyses.regimes.RegimeMap
    ax : matplotlib.axes.Axes, optional
    title : str, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    import numpy as np
    from matplotlib.colors import LogNorm

    ax = axes_for(ax, (7.5, 5.5))
    cells = [c for c in regime_map.cells if c.gap > 0]
    risk = regime_map.risk
    floor = risk / 100
    ns = np.array([c.n for c in cells], dtype=float)
    gaps = np.array([c.gap for c in cells], dtype=float)
    p = np.array([max(c.p_wrong, floor) for c in cells])
    art = ax.scatter(ns, gaps, c=p, s=420, marker="s", cmap=SEQUENTIAL_MAP,
                     norm=LogNorm(vmin=floor, vmax=1.0), edgecolors="0.4", linewidths=0.5)
    for flag, (marker, label) in _FLAG_STYLE.items():
        chosen = [i for i, c in enumerate(cells) if c.flag == flag]
        if chosen:
            ax.scatter(ns[chosen], gaps[chosen], marker=marker, s=50, c="white", edgecolors="k",
                       linewidths=0.8, label=label)
    timed = [i for i, c in enumerate(cells) if c.time_flag in ("slower", "faster")]
    if timed:
        ax.scatter(ns[timed], gaps[timed], marker="o", s=260, facecolors="none",
                   edgecolors=PALETTE[1], linewidths=1.8,
                   label=f"time flag (SSA median vs ODE off by > {regime_map.time_factor:g}x)")
    boundary = regime_map.boundary
    if boundary.critical_gaps:
        cn = [n for n, _ in boundary.critical_gaps]
        cg = [g for _, g in boundary.critical_gaps]
        ax.scatter(cn, cg, marker="D", s=40, c=PALETTE[4], zorder=5,
                   label=f"critical gap (P(disagree) = {risk:g})")
    if boundary.exponent is not None:
        grid = np.geomspace(ns.min(), ns.max(), 50)
        ax.plot(grid, boundary.prefactor * grid ** boundary.exponent, "--", c=PALETTE[4],
                label=f"fit: gap ~ n^{boundary.exponent:.2f}"
                      + ("" if boundary.low is None else
                         f" (95% CI {boundary.low:.2f} .. {boundary.high:.2f})"))
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("n (agents / molecules of the two inputs)")
    ax.set_ylabel("gap (majority count minus minority count)")
    ax.set_title(title or f"Where the mean field misleads (risk {risk:g})")
    ax.figure.colorbar(art, ax=ax, label="P(stochastic run disagrees with ODE label)")
    ax.legend(loc="upper left", fontsize=7, framealpha=0.85)
    ax.margins(0.12)
    return ax


def plot_feasibility(rows, *, ax=None, title: str | None = None, chosen=None,
                     risk: float | None = None, deadline_hours: float | None = None,
                     note: str | None = None):
    """Droplet volume (fL) against concentration (nM) with the feasible region shaded.

    Parameters
    ----------
    rows : sequence of dict
        One per concentration: ``concentration_molar``, ``volume_liters``
        (smallest feasible droplet volume, None when no volume meets the
        deadline), ``copies``. Values are in SI units; the axes show nM and fL.
    ax : matplotlib.axes.Axes, optional
    title : str, optional
    chosen : dict, optional
        The recommended row, starred.
    risk, deadline_hours : float, optional
        For the title.
    note : str, optional
        A footnote under the axes (the wet-lab caution).

    Returns
    -------
    matplotlib.axes.Axes
    """
    import numpy as np

    from crn.core.units import CONCENTRATION_UNITS, VOLUME_UNITS, volume_for

    nano, femto = CONCENTRATION_UNITS["nM"], VOLUME_UNITS["fL"]
    ax = axes_for(ax, (7, 5.4 if note else 5))
    feasible = [r for r in rows if r.get("volume_liters")]
    infeasible = [r for r in rows if not r.get("volume_liters")]
    conc_all = np.array([r["concentration_molar"] for r in rows])
    top = max([r["volume_liters"] for r in feasible], default=1e-12) * 100 / femto
    if feasible:
        c = np.array([r["concentration_molar"] for r in feasible]) / nano
        v = np.array([r["volume_liters"] for r in feasible]) / femto
        ax.fill_between(c, v, top, color="tab:green", alpha=0.25,
                        label="feasible: meets risk and deadline")
        ax.plot(c, v, "o-", c="tab:green", label="smallest droplet volume")
    if infeasible:
        c = np.array([r["concentration_molar"] for r in infeasible]) / nano
        ax.axvspan(c.min() / 1.3, c.max() * 1.3, color="0.85",
                   label="too slow for the deadline at any volume")
    for n in (1e3, 1e4, 1e5):
        ax.plot(conc_all / nano, [volume_for(n, c) / femto for c in conc_all], ":", c="0.5",
                lw=0.8)
        ax.annotate(f"{n:.0e} copies", (conc_all[-1] / nano, volume_for(n, conc_all[-1]) / femto),
                    fontsize=7, color="0.4", ha="right", va="bottom")
    if chosen is not None and chosen.get("volume_liters"):
        ax.scatter([chosen["concentration_molar"] / nano], [chosen["volume_liters"] / femto],
                   marker="*", s=250, c="tab:red", zorder=5, label="smallest droplet")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("total strand concentration (nM)")
    ax.set_ylabel("droplet volume (fL)")
    parts = []
    if risk is not None:
        parts.append(f"risk {risk:g}")
    if deadline_hours is not None:
        parts.append(f"deadline {deadline_hours:g} h")
    ax.set_title(title or ("Droplet designs that decide" + (f" ({', '.join(parts)})"
                                                            if parts else "")))
    ax.set_ylim(top=top)
    if not math.isfinite(top):
        ax.autoscale()
    ax.legend(fontsize=7, loc="lower left")
    if note:
        import textwrap

        ax.figure.text(0.01, 0.005, "\n".join(textwrap.wrap(note, 130)), fontsize=6,
                       color="0.3", ha="left", va="bottom")
        engine = ax.figure.get_layout_engine()
        if engine is not None and hasattr(engine, "set"):
            engine.set(rect=(0, 0.09, 1, 0.91))
    return ax
