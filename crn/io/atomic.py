"""Whole-or-nothing file writes: a temporary file in the same folder, renamed into place.

Every file the tool writes goes through here, so a reader (or a user whose run
was interrupted) sees the old file or the complete new one, never half of one.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

from ..errors import CRNError

__all__ = ["atomic_path", "write_atomic", "save_figure"]


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path next to ``path``; rename it over ``path`` when the block succeeds.

    For writers that insist on a file name (matplotlib's ``savefig``). The
    temporary name keeps the suffix, so format detection by extension works.
    On an exception the temporary file is removed and ``path`` is untouched.

    Parameters
    ----------
    path : str or Path
        The file to create or replace.

    Yields
    ------
    Path
        The temporary file to write, in the same folder as ``path``.

    Raises
    ------
    CRNError
        When the folder does not exist or cannot be written.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    try:
        fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix, dir=folder)
    except OSError as err:
        raise CRNError(f"{path}: cannot write: {err.strerror}") from err
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException as err:
        tmp.unlink(missing_ok=True)
        if isinstance(err, OSError):
            raise CRNError(f"{path}: cannot write: {err.strerror}") from err
        raise
    _fsync_folder(folder)


def write_atomic(path, data) -> Path:
    """Write ``data`` (str or bytes) to ``path`` whole or not at all (fsync'ed before the rename).

    Parameters
    ----------
    path : str or Path
        The file to create or replace.
    data : str or bytes
        The content; text is written as UTF-8.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    CRNError
        When the folder does not exist or cannot be written.
    """
    with atomic_path(path) as tmp:
        binary = isinstance(data, bytes)
        with open(tmp, "wb" if binary else "w", **({} if binary else {"encoding": "utf-8"})) as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    return Path(path)


def save_figure(path, figure, dpi: int = 150) -> None:
    """Save a matplotlib figure atomically; the format follows the file suffix.

    Parameters
    ----------
    path : str or Path
        The file to create or replace; with no suffix the format is PNG.
    figure : matplotlib.figure.Figure
    dpi : int, default 150
        Resolution of raster formats.

    Raises
    ------
    CRNError
        When the folder does not exist or cannot be written.
    """
    fmt = Path(path).suffix.lstrip(".").lower() or "png"
    with atomic_path(path) as tmp:
        figure.savefig(tmp, format=fmt, dpi=dpi)


def _fsync_folder(folder: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
