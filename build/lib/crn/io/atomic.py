"""Whole-or-nothing file writes that respect the user's umask.

Every file the tool writes goes through here, so a reader (or a user whose run
was interrupted) sees the old file or the complete new one, never half of one,
and no temporary file is left in the target folder:

* The content goes to an anonymous file in the target folder (Linux
  ``O_TMPFILE``), which has no name until it is complete: if the process dies
  at any point before that, even by SIGKILL, nothing is left behind. It is
  then given a temporary name and renamed over the target with SIGINT and
  SIGTERM held back, so an interruption lands before or after, never between.
* Where the file system has no anonymous files, a named temporary file
  (``.<name>.crn-tmp-<pid>-<random><suffix>``) is used and removed on every exit path
  the process survives; one left by a killed process is removed by the next
  write to the same folder.
* New files get mode ``0666 & ~umask`` (0644 under the usual umask 022), as
  other tools' files do, so colleagues sharing a folder can read them.
"""

from __future__ import annotations

import contextlib
import errno
import os
import secrets
import signal
from pathlib import Path

from crn.core.errors import CRNError

__all__ = ["atomic_open", "atomic_path", "write_atomic", "save_figure", "file_mode",
           "TEMP_MARK", "PAUSE_HOOK"]

TEMP_MARK = ".crn-tmp-"
"""Part of every named temporary file's name (``.<target>.crn-tmp-<pid>-<random><suffix>``)."""

PAUSE_HOOK = "CRN_TEST_PAUSE_BEFORE_RENAME"
"""Test hook: seconds to sleep after the content is written and before it is renamed into
place (prints ``crn-test: written`` on standard error first)."""

_ANONYMOUS = hasattr(os, "O_TMPFILE") and os.path.isdir("/proc/self/fd")


def file_mode() -> int:
    """The mode a new file gets: ``0o666 & ~umask``."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return 0o666 & ~int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)  # reading the umask means setting it; put it straight back
    os.umask(mask)
    return 0o666 & ~mask


def _folder(path: Path) -> Path:
    return path.parent if str(path.parent) else Path(".")


def _cannot(path, err: OSError) -> CRNError:
    return CRNError(f"{path}: cannot write: {err.strerror or err}")


@contextlib.contextmanager
def _signals_held():
    """Hold SIGINT and SIGTERM back for the block (they are delivered after it)."""
    held = {signal.SIGINT, signal.SIGTERM}
    try:
        previous = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    except (AttributeError, OSError, ValueError):  # pragma: no cover - not POSIX
        yield
        return
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


def _pause_for_tests() -> None:
    delay = os.environ.get(PAUSE_HOOK)
    if delay:
        import sys
        import time

        print("crn-test: written", file=sys.stderr, flush=True)
        time.sleep(float(delay))


def _temp_name(path: Path) -> Path:
    # the target's suffix last, so writers that pick a format by suffix still can
    return (_folder(path)
            / f".{path.name}{TEMP_MARK}{os.getpid()}-{secrets.token_hex(4)}{path.suffix}")


def _remove_stale(path: Path) -> None:
    """Remove temporary files of ``path`` left by processes that no longer exist."""
    prefix = f".{path.name}{TEMP_MARK}"
    with contextlib.suppress(OSError):
        for entry in os.scandir(_folder(path)):
            if not entry.name.startswith(prefix):
                continue
            pid = entry.name[len(prefix):].split("-", 1)[0]
            if pid.isdigit() and int(pid) != os.getpid() and not _alive(int(pid)):
                with contextlib.suppress(OSError):
                    os.unlink(entry.path)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


def _open_anonymous(folder: Path) -> int | None:
    if not _ANONYMOUS:
        return None
    try:
        return os.open(folder, os.O_TMPFILE | os.O_WRONLY | os.O_CLOEXEC, 0o666)
    except OSError as err:
        if err.errno in (errno.EOPNOTSUPP, errno.EISDIR, errno.EINVAL):
            return None  # this file system has no anonymous files: use a named one
        raise


@contextlib.contextmanager
def atomic_open(path, mode: str = "w"):
    """Open a file object whose content replaces ``path`` when the block succeeds.

    Parameters
    ----------
    path : str or Path
        The file to create or replace.
    mode : {"w", "wb"}
        Text (UTF-8) or binary.

    Yields
    ------
    file object
        Write the whole content to it; on an exception ``path`` is untouched and
        nothing is left in the folder.

    Raises
    ------
    CRNError
        When the folder does not exist or cannot be written.
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"`mode` must be 'w' or 'wb', got {mode!r}")
    path = Path(path)
    folder = _folder(path)
    try:
        fd = _open_anonymous(folder)
    except OSError as err:
        raise _cannot(path, err) from err
    if fd is None:
        with atomic_path(path) as tmp, open(tmp, mode, **_encoding(mode)) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        return
    try:
        with open(fd, mode, closefd=False, **_encoding(mode)) as fh:
            yield fh
            fh.flush()
            os.fsync(fd)
        _pause_for_tests()
        _remove_stale(path)
        with _signals_held():
            tmp = _temp_name(path)
            try:
                _link_anonymous(fd, tmp)
                os.replace(tmp, path)
            except BaseException:
                with contextlib.suppress(OSError):
                    os.unlink(tmp)
                raise
    except OSError as err:
        raise _cannot(path, err) from err
    finally:
        os.close(fd)
    _fsync_folder(folder)


def _link_anonymous(fd: int, name: Path) -> None:
    # linkat(AT_SYMLINK_FOLLOW) through /proc/self/fd; os.link uses plain link() (which does
    # not follow the magic link) unless a directory descriptor is given
    proc = os.open("/proc/self/fd", os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.link(str(fd), name, src_dir_fd=proc, follow_symlinks=True)
    finally:
        os.close(proc)


def _encoding(mode: str) -> dict:
    return {} if "b" in mode else {"encoding": "utf-8"}


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path next to ``path``; rename it over ``path`` when the block succeeds.

    For writers that insist on a file name; prefer :func:`atomic_open`, which
    leaves nothing behind even when the process is killed. The temporary file
    is removed on an exception (Ctrl-C and SIGTERM included; one left by a
    killed process is removed by the next write of ``path``).

    Parameters
    ----------
    path : str or Path
        The file to create or replace.

    Yields
    ------
    Path
        The temporary file to write, in the same folder as ``path``, with the
        mode a new file gets under the current umask.

    Raises
    ------
    CRNError
        When the folder does not exist or cannot be written.
    """
    path = Path(path)
    _remove_stale(path)
    tmp = _temp_name(path)
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_CLOEXEC, 0o600)
        try:
            os.fchmod(fd, file_mode())
        finally:
            os.close(fd)
    except OSError as err:
        raise _cannot(path, err) from err
    try:
        yield tmp
        _pause_for_tests()
        with _signals_held():
            os.replace(tmp, path)
    except BaseException as err:
        tmp.unlink(missing_ok=True)
        if isinstance(err, OSError):
            raise _cannot(path, err) from err
        raise
    _fsync_folder(_folder(path))


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
    with atomic_open(path, "wb" if isinstance(data, bytes) else "w") as fh:
        fh.write(data)
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
    with atomic_open(path, "wb") as fh:
        figure.savefig(fh, format=fmt, dpi=dpi)


def _fsync_folder(folder: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
