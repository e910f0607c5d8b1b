"""The time axis of the ODE and comparison figures: parallel time, and minutes when known."""

from __future__ import annotations

__all__ = ["label_time_axis", "PARALLEL_TIME_LABEL"]

#: One unit of parallel time is n interactions, so each agent takes part in two on average.
PARALLEL_TIME_LABEL = "parallel time (interactions / n)"


def label_time_axis(ax, protocol: bool, seconds_per_time: float | None = None):
    """Label the x axis in parallel time (protocols) or network time; add minutes on top.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    protocol : bool
        Whether the times are parallel time (a protocol) or network time.
    seconds_per_time : float, optional
        Seconds in one unit of the x axis (``1 / (k C)`` for a protocol built at
        rate constant ``k`` and total concentration ``C``); when given, a second
        axis along the top shows the same times in minutes.

    Returns
    -------
    matplotlib.axes.Axes or None
        The secondary (minutes) axis, or None.
    """
    ax.set_xlabel(PARALLEL_TIME_LABEL if protocol else "time (network time units)")
    if seconds_per_time is None:
        return None
    minutes = seconds_per_time / 60.0
    top = ax.secondary_xaxis("top", functions=(lambda t: t * minutes, lambda m: m / minutes))
    top.set_xlabel("minutes (model prediction at the given rate and concentration)")
    return top
