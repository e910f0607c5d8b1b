"""Writing mean-field results to files, atomically (a temporary file renamed into place)."""

from __future__ import annotations

import csv
import io

from .atomic import write_atomic

__all__ = ["write_mean_field_csv", "mean_field_csv"]


def mean_field_csv(result) -> str:
    """CSV text: a ``time`` column, then one column per species (the result's values)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["time", *result.species])
    for t, row in zip(result.times, result.values, strict=True):
        writer.writerow([repr(float(t)), *(repr(float(v)) for v in row)])
    return out.getvalue()


def write_mean_field_csv(path, result) -> None:
    """Write :func:`mean_field_csv` to ``path`` atomically."""
    text = mean_field_csv(result)
    write_atomic(path, text)
