"""Per-run tables of a stochastic ensemble (CSV)."""

from __future__ import annotations

import csv
import io

import numpy as np

from crn.io.atomic import write_atomic

__all__ = ["runs_csv", "write_runs_csv", "PARTIAL_MARK"]

_COLUMNS = ("run", "label", "consensus_time", "final_label", "held", "events", "end_time",
            "status")


PARTIAL_MARK = "# partial:"
"""Start of the first line of a CSV that holds only the runs finished before a stop."""


def runs_csv(ensemble, note: str | None = None) -> str:
    """One CSV row per run: run index, first consensus label (``none``) and time, final label,
    whether it held, events fired, end time, status, then the final count of each species.

    An ensemble with fewer runs than requested starts with a comment line
    ``# partial: K of N runs (NOTE); ...`` so a reader knows the table is
    incomplete (``pandas.read_csv(..., comment="#")`` skips it).

    Parameters
    ----------
    ensemble : crn.solvers.simulate.Ensemble
    note : str, optional
        Why the ensemble is incomplete (``"interrupted"``).

    Returns
    -------
    str
    """
    out = io.StringIO()
    if ensemble.runs < ensemble.requested:
        why = f" ({note})" if note else ""
        out.write(f"{PARTIAL_MARK} {ensemble.runs} of {ensemble.requested} runs{why}; "
                  "the rows are the finished runs\n")
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow([*_COLUMNS, *(f"final_{s}" for s in ensemble.species)])
    for r in range(ensemble.runs):
        t = ensemble.consensus_times[r]
        final = ensemble.counts[r, -1] if ensemble.counts.shape[1] else []
        writer.writerow([
            int(ensemble.run_index[r]),
            ensemble.labels[r] or "none",
            "" if not np.isfinite(t) else repr(float(t)),
            ensemble.final_labels[r] or "none",
            bool(ensemble.held[r]),
            int(ensemble.events[r]),
            repr(float(ensemble.end_times[r])),
            ensemble.statuses[r],
            *(int(c) for c in final),
        ])
    return out.getvalue()


def write_runs_csv(ensemble, path, note: str | None = None) -> None:
    """Write :func:`runs_csv` to ``path`` atomically (temporary file and rename).

    Parameters
    ----------
    ensemble : crn.solvers.simulate.Ensemble
    note : str, optional
        Why the ensemble is incomplete, for the ``# partial`` line.
    path : str or Path
        The CSV file to create or replace.

    Raises
    ------
    CRNError
        When the file cannot be written.
    """
    write_atomic(path, runs_csv(ensemble, note))
