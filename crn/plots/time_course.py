"""Figure of a stochastic time course: mean and 5-95% band per species, mean-field ODE overlaid."""

from __future__ import annotations

import numpy as np

from crn.plots.axes import axes_for, cycle_colors

__all__ = ["plot_time_course"]


def plot_time_course(course, *, ode=None, ax=None, title: str | None = None,
                     per_unit: float | None = None, unit_name: str | None = None):
    """Plot each species' mean count with its 5-95% band, and the ODE as a dashed line.

    Parameters
    ----------
    course : crn.solvers.time_course.TimeCourse
        In counts (from an ensemble), or an ODE course alone.
    ode : crn.solvers.time_course.TimeCourse, optional
        The mean-field course in counts on the same times, drawn dashed.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure when None.
    title : str, optional
    per_unit : float, optional
        Molecules per unit of the model's own scale (the volume for a network,
        n for a protocol); adds a right-hand axis in that scale.
    unit_name : str, optional
        Name of that scale (``"concentration (molecules / volume)"``, say).

    Returns
    -------
    matplotlib.axes.Axes
    """
    ax = axes_for(ax, (7, 4.5))
    colours = cycle_colors()
    for i, name in enumerate(course.species):
        colour = colours[i % len(colours)]
        ax.plot(course.times, course.mean[:, i], color=colour, lw=1.6, label=f"{name} mean")
        if course.q05 is not None and course.q95 is not None:
            ax.fill_between(course.times, course.q05[:, i], course.q95[:, i], color=colour,
                            alpha=0.2, lw=0, label=f"{name} 5-95%")
        if ode is not None and name in ode.species:
            ax.plot(ode.times, ode.column("mean", name), color=colour, ls="--", lw=1.2,
                    label=f"{name} mean-field ODE")
    ax.set_xlabel(f"{course.time_units} (the model's time unit)")
    unit = {"count": "molecules (count)", "concentration": "concentration (molecules / volume)",
            "fraction": "fraction of the population"}.get(course.units, course.units)
    ax.set_ylabel(unit)
    if per_unit is not None and per_unit > 0 and course.units == "count":
        scale = float(per_unit)
        right = ax.secondary_yaxis("right", functions=(lambda x: np.asarray(x) / scale,
                                                       lambda y: np.asarray(y) * scale))
        right.set_ylabel(unit_name or f"per {scale:g} molecules")
    if course.times.size:
        ax.set_xlim(0, max(float(course.times[-1]), 1e-12))
    runs = f", {course.runs} runs" if course.source == "ssa" else ""
    ax.set_title(title or f"Time course{runs}", fontsize="medium")
    ax.legend(loc="best", fontsize="small", ncol=2 if len(course.species) > 3 else 1)
    return ax
