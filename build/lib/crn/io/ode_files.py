"""Writing mean-field results to files, atomically (a temporary file renamed into place)."""

from __future__ import annotations

import csv
import io

from crn.io.atomic import write_atomic

__all__ = ["write_mean_field_csv", "mean_field_csv"]


def mean_field_csv(result) -> str:
    """CSV text: a ``time`` column, then one column per species (the result's values).

    Parameters
    ----------
    result : crn.solvers.ode.MeanFieldResult

    Returns
    -------
    str
        A header row, then one row per time point, numbers written with ``repr``.
    """
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["time", *result.species])
    for t, row in zip(result.times, result.values, strict=True):
        writer.writerow([repr(float(t)), *(repr(float(v)) for v in row)])
    return out.getvalue()


def write_mean_field_csv(path, result) -> None:
    """Write :func:`mean_field_csv` to ``path`` atomically.

    Parameters
    ----------
    path : str or Path
        The CSV file to create or replace.
    result : crn.solvers.ode.MeanFieldResult

    Raises
    ------
    CRNError
        When the file cannot be written.
    """
    text = mean_field_csv(result)
    write_atomic(path, text)
