"""Regime-map tables as CSV text (every number of every cell)."""

from __future__ import annotations

import csv
import io

__all__ = ["COLUMNS", "table_csv"]

COLUMNS = ["n", "gap", "ode_label", "ode_time", "p_wrong", "low", "high", "wrong", "runs", "flag",
           "time_flag", "ssa_median_time", "method", "horizon", "correct_label", "implied_by"]


def table_csv(cells) -> str:
    """The cells as CSV text (every number).

    Parameters
    ----------
    cells : iterable of crn.analyses.regimes.RegimeCell

    Returns
    -------
    str
        A header row of :data:`COLUMNS`, then one row per cell; None is written
        as an empty field.
    """
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=COLUMNS, lineterminator="\n")
    writer.writeheader()
    for cell in cells:
        row = cell.to_dict()
        writer.writerow({k: "" if row[k] is None else row[k] for k in COLUMNS})
    return buffer.getvalue()
