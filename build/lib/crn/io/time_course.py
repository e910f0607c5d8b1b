"""Time courses as CSV in long form (one row per time and species), written atomically."""

from __future__ import annotations

import csv
import io
import math

from crn.io.atomic import write_atomic

__all__ = ["time_course_csv", "write_time_course_csv", "COLUMNS"]

#: Header of the long-form CSV; the ODE leaves ``sd``, ``q05`` and ``q95`` empty.
COLUMNS = ("time", "species", "mean", "sd", "q05", "q95")


def _cell(values, t, s) -> str:
    if values is None:
        return ""
    v = float(values[t, s])
    return repr(v) if math.isfinite(v) else ""


def time_course_csv(course) -> str:
    """CSV text of a time course: ``time, species, mean, sd, q05, q95``.

    Parameters
    ----------
    course : crn.solvers.time_course.TimeCourse

    Returns
    -------
    str
        A header row, then one row per sample time and species (time-major);
        statistics the course lacks (the ODE's spread) and undefined ones
        (sd of one run) are empty cells.
    """
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(COLUMNS)
    for t, time in enumerate(course.times):
        for s, name in enumerate(course.species):
            writer.writerow([repr(float(time)), name,
                             *(_cell(getattr(course, k), t, s)
                               for k in ("mean", "sd", "q05", "q95"))])
    return out.getvalue()


def write_time_course_csv(path, course) -> None:
    """Write :func:`time_course_csv` to ``path`` atomically.

    Parameters
    ----------
    path : str or Path
    course : crn.solvers.time_course.TimeCourse

    Raises
    ------
    CRNError
        When the file cannot be written.
    """
    write_atomic(path, time_course_csv(course))
