"""Figure of a mean-field solution: each species' share against time, consensus marked."""

from __future__ import annotations

from crn.plots.axes import axes_for

__all__ = ["plot_mean_field"]


def plot_mean_field(result, *, ax=None, title: str | None = None,
                    seconds_per_time: float | None = None):
    """Plot each species' fraction of the population against time.

    Parameters
    ----------
    result : crn.solvers.ode.MeanFieldResult
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure when None.
    title : str, optional
        Default ``"Mean-field ODE"`` (with the consensus, if any).
    seconds_per_time : float, optional
        Seconds in one unit of time; adds a second time axis in minutes.

    Returns
    -------
    matplotlib.axes.Axes
    """
    from crn.plots.time_axis import label_time_axis

    ax = axes_for(ax, (7, 4.5))
    for name, share in result.fractions.items():
        ax.plot(result.times, share, label=name, lw=1.6)
    outcome = result.consensus
    if outcome.label is not None and outcome.time is not None:
        ax.axvline(outcome.time, color="0.3", ls="--", lw=1,
                   label=f"consensus on {outcome.label} at t = {outcome.time:.4g}")
    protocol = result.units == "fraction"
    label_time_axis(ax, protocol, seconds_per_time)
    ax.set_ylabel("fraction of the population" if protocol
                  else "fraction of all molecules (concentration / total)")
    ax.set_ylim(-0.02, 1.02)
    if result.times.size:
        ax.set_xlim(0, 1.03 * max(float(result.times[-1]), 1e-12))
    ax.set_title(title or "Mean-field ODE")
    ax.legend(loc="best", fontsize="small")
    return ax
