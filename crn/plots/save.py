"""Saving a figure: every figure the tool writes (commands, reports, the demo) goes through here."""

from __future__ import annotations

from pathlib import Path

__all__ = ["save_figure", "use_file_backend"]


def use_file_backend() -> None:
    """Draw without a display (matplotlib's Agg backend); call before the first figure."""
    import matplotlib

    matplotlib.use("Agg")


def save_figure(figure, target, *, dpi: int | None = 150, format: str | None = None,
                close: bool = True, **options) -> None:
    """Save a matplotlib figure, whole or not at all, and close it.

    Parameters
    ----------
    figure : matplotlib.figure.Figure
    target : str, Path or binary file object
        A path is replaced atomically (:func:`crn.io.atomic.atomic_open`: the old
        file or the complete new one, never half of one); a file object (an
        ``io.BytesIO``, say) is written as it is.
    dpi : int or None, default 150
        Resolution of raster formats; None: matplotlib's ``savefig.dpi`` setting.
    format : str, optional
        ``"png"``, ``"svg"``, ``"pdf"``, ...; default the path's suffix (PNG when it
        has none). Needed for a file object.
    close : bool, default True
        Close the figure afterwards (also when saving fails), freeing its memory.
    **options
        Passed on to ``Figure.savefig`` (e.g. ``metadata``).

    Raises
    ------
    CRNError
        When the path's folder does not exist or cannot be written.
    ValueError
        For a file object without ``format``.
    """
    from crn.io.atomic import atomic_open

    try:
        if isinstance(target, (str, Path)):
            fmt = format or Path(target).suffix.lstrip(".").lower() or "png"
            with atomic_open(target, "wb") as fh:
                figure.savefig(fh, format=fmt, dpi=dpi, **options)
        else:
            if format is None:
                raise ValueError("`format` is needed to save a figure to a file object")
            figure.savefig(target, format=format, dpi=dpi, **options)
    finally:
        if close:
            import matplotlib.pyplot as plt

            plt.close(figure)
