"""Figure of a DNA implementation against its formal network: signals over time, fuel left."""

from __future__ import annotations

import numpy as np

from crn.plots.axes import axes_for, cycle_colors

__all__ = ["plot_implementation"]


def _signal_shares(impl, values, per_unit: float):
    """Each formal species, free plus held in gates, per formal molecules-per-unit."""
    from crn.analyses.implemented import held_matrix
    from crn.solvers.ode import molecules_per_unit

    scale = per_unit / molecules_per_unit(impl.formal)
    totals = np.asarray(values) @ held_matrix(impl) * scale
    return {s: totals[..., i] for i, s in enumerate(impl.formal.species)}


def plot_implementation(impl, formal_result, result, ensemble=None, *, ax=None,
                        title: str | None = None, disagreement=None):
    """Plot the formal ODE (solid), the implementation's ODE (dashed) and its runs (band).

    Each formal species, free plus held in gates (the signal strands not yet
    consumed, what decisions count), as a fraction of the formal population (or
    of the formal molecules per unit), against time in the formal network's unit;
    the least fuel fraction left over time (implementation ODE) on the right axis.

    Parameters
    ----------
    impl : crn.dna.Implementation
    formal_result : crn.solvers.ode.MeanFieldResult
        Solve of ``impl.formal``.
    result : crn.solvers.ode.MeanFieldResult
        Solve of ``impl.network``.
    ensemble : crn.solvers.simulate.Ensemble, optional
        Runs of ``impl.network``: median (dotted) and 5-95% band per signal.
    ax : matplotlib.axes.Axes, optional
    title : str, optional
    disagreement : (p, low, high), optional
        P(run differs from the implementation ODE's label), shown in the legend.

    Returns
    -------
    matplotlib.axes.Axes
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    from crn.solvers.ode import molecules_per_unit

    ax = axes_for(ax, (9, 5))
    colors = cycle_colors()
    formal = impl.formal
    shares = _signal_shares(impl, result.values, float(result.molecules_per_unit))
    handles = []
    band = None
    if ensemble is not None and ensemble.runs:
        counts = ensemble.counts.astype(np.float64)
        band = _signal_shares(impl, counts, 1.0)
    for i, name in enumerate(formal.species):
        color = colors[i % len(colors)]
        ax.plot(formal_result.times, formal_result.values[:, formal.index[name]]
                * float(formal_result.molecules_per_unit) / molecules_per_unit(formal),
                color=color, lw=2.2)
        ax.plot(result.times, shares[name], color=color, lw=1.6, ls="--")
        if band is not None:
            q05, median, q95 = np.quantile(band[name], [0.05, 0.5, 0.95], axis=0)
            ax.fill_between(ensemble.times, q05, q95, color=color, alpha=0.15, lw=0)
            ax.plot(ensemble.times, median, color=color, lw=1.0, ls=":")
        handles.append(Line2D([], [], color=color, lw=2.2, label=name))
    handles += [Line2D([], [], color="0.2", lw=2.2, label="formal ODE"),
                Line2D([], [], color="0.2", lw=1.6, ls="--",
                       label=f"{impl.scheme} ODE (free + held)")]
    if band is not None:
        handles += [Line2D([], [], color="0.2", lw=1.0, ls=":",
                           label=f"{impl.scheme} runs, median"),
                    Patch(color="0.2", alpha=0.15, label=f"{impl.scheme} runs, 5-95%")]
    for res, ls, who in ((formal_result, "-", "formal"), (result, "--", impl.scheme)):
        outcome = res.consensus
        if outcome.label is not None and outcome.time is not None:
            ax.axvline(outcome.time, color="0.4", ls=ls, lw=0.8)
            handles.append(Line2D([], [], color="0.4", ls=ls, lw=0.8,
                                  label=f"{who} consensus {outcome.label} at {outcome.time:.3g}"))
    if disagreement is not None:
        p, low, high = disagreement
        handles.append(Line2D([], [], ls="", label=f"P(run differs from {impl.scheme} ODE)\n"
                                                   f"= {p:.3f}, 95% [{low:.3f}, {high:.3f}]"))
    if impl.fuel and result.times.size:
        index = [impl.network.index[s] for s in impl.fuel]
        start = np.asarray(impl.network.initial, dtype=np.float64)[index]
        left = (np.asarray(result.values)[:, index] * float(result.molecules_per_unit)
                / np.where(start > 0, start, 1.0)).min(axis=1)
        twin = ax.twinx()
        twin.plot(result.times, left, color="k", lw=1.0, ls="-.")
        twin.set_ylabel("least fuel fraction left (dash-dot)")
        twin.set_ylim(0, 1.05)
    unit = "parallel time" if formal.from_protocol else "time (formal network's unit)"
    ax.set_xlabel(f"{unit}; 1 unit = {impl.params.seconds_per_time_unit:.3g} s")
    ax.set_ylabel("signal, fraction of the formal population" if formal.from_protocol
                  else "signal, molecules per formal volume")
    ax.set_title(title or f"Formal network vs its {impl.scheme} DNA implementation")
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.08, 1.0), fontsize="small")
    return ax
