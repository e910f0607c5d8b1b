"""Writing mean-field results to files, atomically (a temporary file renamed into place)."""

from __future__ import annotations

import contextlib
import csv
import io
import os
import tempfile
from pathlib import Path

__all__ = ["atomic_target", "write_mean_field_csv", "mean_field_csv", "save_figure"]


@contextlib.contextmanager
def atomic_target(path, suffix: str = ""):
    """Yield a temporary path next to ``path``; rename it over ``path`` when the block succeeds."""
    path = Path(path)
    handle, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix or path.suffix,
                                   dir=path.parent if str(path.parent) else ".")
    os.close(handle)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


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
    with atomic_target(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def save_figure(path, figure) -> None:
    """Save a matplotlib figure atomically; the format follows the file suffix."""
    path = Path(path)
    fmt = path.suffix.lstrip(".").lower() or "png"
    with atomic_target(path) as tmp:
        figure.savefig(tmp, format=fmt, dpi=150)
