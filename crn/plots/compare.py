"""Figure of the mean field against the stochastic ensemble: ODE curve over the mean and a band."""

from __future__ import annotations

import numpy as np

from crn.plots.axes import axes_for, cycle_colors

__all__ = ["plot_compare", "ensemble_fractions"]


def ensemble_fractions(ensemble) -> np.ndarray:
    """Each run's species shares of all molecules at each sample time.

    Parameters
    ----------
    ensemble : crn.solvers.simulate.Ensemble

    Returns
    -------
    ndarray of float64, shape (runs, n_times, n_species)
        ``counts / counts.sum(species)`` (0 where no molecule is left).
    """
    counts = ensemble.counts.astype(np.float64)
    total = counts.sum(axis=2, keepdims=True)
    return np.divide(counts, total, out=np.zeros_like(counts), where=total > 0)


def plot_compare(ode, ensemble, *, ax=None, title: str | None = None, disagreement=None,
                 seconds_per_time: float | None = None):
    """Plot the ODE's share of each species over the ensemble's mean and 5-95% band.

    Parameters
    ----------
    ode : crn.solvers.ode.MeanFieldResult
        Solved on (about) the ensemble's time window.
    ensemble : crn.solvers.simulate.Ensemble
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure when None.
    title : str, optional
    disagreement : (p, low, high), optional
        Probability that a run's label differs from the ODE's, shown in the legend.
    seconds_per_time : float, optional
        Seconds in one unit of time; adds a second time axis in minutes.

    Returns
    -------
    matplotlib.axes.Axes
    """
    from crn.plots.time_axis import label_time_axis

    ax = axes_for(ax, (9, 5))
    shares = ensemble_fractions(ensemble)
    q05, q95 = np.quantile(shares, [0.05, 0.95], axis=0)
    mean = shares.mean(axis=0)
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    colors = cycle_colors()
    ode_shares = ode.fractions
    handles = []
    for i, name in enumerate(ensemble.species):
        color = colors[i % len(colors)]
        ax.fill_between(ensemble.times, q05[:, i], q95[:, i], color=color, alpha=0.18, lw=0)
        ax.plot(ensemble.times, mean[:, i], color=color, ls="--", lw=1.3)
        ax.plot(ode.times, ode_shares[name], color=color, lw=2.2)
        handles.append(Line2D([], [], color=color, lw=2.2, label=name))
    handles += [Line2D([], [], color="0.2", lw=2.2, label="ODE"),
                Line2D([], [], color="0.2", lw=1.3, ls="--", label="stochastic mean"),
                Patch(color="0.2", alpha=0.18, label="stochastic 5-95%")]
    if ode.consensus.label is not None and ode.consensus.time is not None:
        ax.axvline(ode.consensus.time, color="0.3", ls=":", lw=1)
        handles.append(Line2D([], [], color="0.3", ls=":", lw=1,
                              label=f"ODE consensus on {ode.consensus.label} "
                                    f"at {ode.consensus.time:.3g}"))
    if disagreement is not None:
        p, low, high = disagreement
        handles.append(Line2D([], [], ls="", label=f"P(run's label differs from ODE)\n"
                                                   f"= {p:.3f}, 95% [{low:.3f}, {high:.3f}]"))
    protocol = ode.units == "fraction"
    label_time_axis(ax, protocol, seconds_per_time)
    ax.set_ylabel("fraction of the population" if protocol else "fraction of all molecules")
    ax.set_xlim(0, float(ensemble.times[-1]) if ensemble.times.size else 1.0)
    ax.set_ylim(-0.02, 1.02)
    ax.set_title(title or f"Mean field vs {ensemble.runs} stochastic runs ({ensemble.engine})")
    ax.legend(handles=handles, loc="center left", bbox_to_anchor=(1.01, 0.5), fontsize="small")
    return ax
