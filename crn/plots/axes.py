"""What every figure function starts with: the axes to draw on and the colours in order."""

from __future__ import annotations

__all__ = ["axes_for", "cycle_colors"]


def axes_for(ax, figsize: tuple[float, float]):
    """The axes to draw on: ``ax`` itself, or those of a new figure when it is None.

    Parameters
    ----------
    ax : matplotlib.axes.Axes or None
    figsize : (float, float)
        Width and height in inches of the new figure (constrained layout).

    Returns
    -------
    matplotlib.axes.Axes
    """
    if ax is not None:
        return ax
    import matplotlib.pyplot as plt

    _, ax = plt.subplots(figsize=figsize, layout="constrained")
    return ax


def cycle_colors() -> list[str]:
    """The line colours of matplotlib's current property cycle, in order."""
    import matplotlib.pyplot as plt

    return list(plt.rcParams["axes.prop_cycle"].by_key()["color"])
