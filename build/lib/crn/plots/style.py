"""The project's colour scheme, chosen so that colour-blind readers can tell the marks apart.

Seven hues that differ in lightness as well as hue (so they stay apart under
deuteranopia, protanopia and tritanopia and in greyscale print), and a
sequential colour map whose lightness rises monotonically (``cividis``,
designed for colour-vision deficiency) for probabilities.
"""

from __future__ import annotations

from contextlib import contextmanager

__all__ = ["PALETTE", "SEQUENTIAL_MAP", "species_colors", "house_style"]

#: Line and marker colours, in the order species are drawn.
PALETTE = (
    "#1f4e99",  # deep blue
    "#e2871d",  # amber
    "#6fb3dc",  # light sky blue
    "#b7411a",  # brick red
    "#8a5a9e",  # muted purple
    "#d9c23a",  # straw yellow
    "#4d4d4d",  # dark grey
)

#: Colour map for probabilities and other quantities on one scale.
SEQUENTIAL_MAP = "cividis"


def species_colors(names) -> dict[str, str]:
    """One palette colour per name, in order (cycling when there are more names than colours).

    Parameters
    ----------
    names : iterable of str

    Returns
    -------
    dict of str to str
    """
    return {name: PALETTE[i % len(PALETTE)] for i, name in enumerate(names)}


@contextmanager
def house_style():
    """A matplotlib rc context with the palette as colour cycle and readable defaults."""
    import matplotlib as mpl
    from cycler import cycler

    with mpl.rc_context({
        "axes.prop_cycle": cycler(color=list(PALETTE)),
        "image.cmap": SEQUENTIAL_MAP,
        "font.size": 10,
        "axes.titlesize": 11,
        "svg.fonttype": "none",
    }):
        yield
