"""Options and helpers every command shares: model loading, JSON output, progress bars."""

from __future__ import annotations

import json
import sys

import click

from ..io.jsonable import to_jsonable
from ..io.models import load_model
from ..model import parse_overrides

__all__ = ["model_argument", "set_option", "seed_option", "json_option", "load", "emit_json",
           "progress_bar", "to_jsonable", "OUTPUT_FILE", "stop_interrupted", "guard_options",
           "guard"]


def model_argument(func):
    """Add the ``MODEL`` argument (path of a model file) to a click command.

    Parameters
    ----------
    func : callable
        The command function to decorate.

    Returns
    -------
    callable
        ``func`` with the argument, passed to it as ``model``.
    """
    return click.argument("model", type=click.Path(dir_okay=False))(func)


def set_option(func):
    """Add the repeatable ``--set NAME=VALUE`` option to a click command.

    Parameters
    ----------
    func : callable
        The command function to decorate.

    Returns
    -------
    callable
        ``func`` with the option, passed to it as ``sets`` (tuple of str).
    """
    return click.option("--set", "sets", multiple=True, metavar="NAME=VALUE",
                        help="Override a parameter of the model (repeatable).")(func)


def seed_option(func):
    """Add the ``--seed`` option (a non-negative int, default None) to a click command.

    Parameters
    ----------
    func : callable
        The command function to decorate.

    Returns
    -------
    callable
        ``func`` with the option, passed to it as ``seed`` (int or None).
    """
    return click.option("--seed", type=click.IntRange(min=0), default=None,
                        help="Root seed; the same seed gives the same numbers on any number "
                             "of workers. Printed when not given.")(func)


def json_option(func):
    """Add the ``--json`` flag to a click command.

    Parameters
    ----------
    func : callable
        The command function to decorate.

    Returns
    -------
    callable
        ``func`` with the flag, passed to it as ``as_json`` (bool).
    """
    return click.option("--json", "as_json", is_flag=True,
                        help="Print one JSON object on standard output instead of tables.")(func)


def load(model: str, sets):
    """Load a model file with ``--set`` overrides (errors propagate as CRNError).

    Parameters
    ----------
    model : str
        Path of the model file.
    sets : iterable of str or None
        ``NAME=VALUE`` overrides, as given to ``--set``.

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        When the file is missing, unreadable or invalid, or an override is malformed.
    """
    return load_model(model, parse_overrides(sets))


def emit_json(obj) -> None:
    """Write one JSON object on standard output.

    Parameters
    ----------
    obj : object
        Nested dicts, lists, tuples, numpy arrays and scalars, and plain values
        (converted by :func:`~crn.io.jsonable.to_jsonable`); printed with indent 2.
    """
    click.echo(json.dumps(to_jsonable(obj), indent=2))


def progress_bar(description: str, total: int | None, enabled: bool = True):
    """A rich progress bar on standard error, or a no-op when disabled (``--json``).

    The bar is also a no-op when standard error is not a terminal, unless the
    environment sets ``CRN_PROGRESS=1``.

    Parameters
    ----------
    description : str
        Text shown left of the bar.
    total : int or None
        Number of steps expected; None for an unknown total.
    enabled : bool, default True
        False gives the no-op callback.

    Returns
    -------
    context manager
        Yields a callback ``update(done, new_total=None)``: ``done`` is the
        number of steps completed so far (an absolute count, not an increment),
        and ``new_total``, when given, replaces the expected total.
    """
    from contextlib import contextmanager

    @contextmanager
    def bar():
        if not enabled or not sys.stderr.isatty() and not _force_progress():
            yield lambda done, new_total=None: None
            return
        from rich.console import Console
        from rich.progress import (
            BarColumn,
            MofNCompleteColumn,
            Progress,
            TimeElapsedColumn,
            TimeRemainingColumn,
        )

        with Progress("[progress.description]{task.description}", BarColumn(),
                      MofNCompleteColumn(), TimeElapsedColumn(), TimeRemainingColumn(),
                      console=Console(stderr=True), transient=True) as progress:
            task = progress.add_task(description, total=total)

            def update(done, new_total=None):
                if new_total is not None:
                    progress.update(task, total=new_total)
                progress.update(task, completed=done)

            yield update

    return bar()


def _force_progress() -> bool:
    import os

    return os.environ.get("CRN_PROGRESS") == "1"


class OutputFile(click.ParamType):
    """A file the command will write: checked before any work starts, so a typo in a
    folder name fails at once instead of after a long run."""

    name = "file"

    def convert(self, value, param, ctx):
        import os
        from pathlib import Path

        path = Path(value)
        if path.is_dir():
            self.fail(f"{value!r} is a folder, not a file", param, ctx)
        folder = path.parent if str(path.parent) else Path(".")
        if not folder.is_dir():
            self.fail(f"folder {str(folder)!r} of {value!r} does not exist", param, ctx)
        if not os.access(folder, os.W_OK):
            self.fail(f"folder {str(folder)!r} of {value!r} is not writable", param, ctx)
        return str(path)


OUTPUT_FILE = OutputFile()


def stop_interrupted(finished: str):
    """After Ctrl-C or SIGTERM: say what was finished on standard error and exit 130 or 143.

    Parameters
    ----------
    finished : str
        What the command had finished, e.g. ``"after n = 2..7 (no counterexample so far)"``.
    """
    from .. import interrupts

    click.echo(f"crn: {interrupts.reason()} {finished}", err=True)
    click.get_current_context().exit(interrupts.exit_status())


class MemorySize(click.ParamType):
    """A size in bytes: ``4G``, ``512MiB``, ``2.5GB``."""

    name = "size"

    def convert(self, value, param, ctx):
        from ..errors import CRNError
        from ..guards import parse_memory

        try:
            return parse_memory(value)
        except CRNError as err:
            self.fail(str(err).removeprefix("--max-memory: "), param, ctx)


def guard_options(func):
    """Add ``--max-memory SIZE`` and ``--force`` (see :mod:`crn.guards`) to a click command.

    Parameters
    ----------
    func : callable
        The command function to decorate.

    Returns
    -------
    callable
        ``func`` with the options, passed as ``max_memory`` (int bytes or None) and
        ``force`` (bool).
    """
    func = click.option("--force", is_flag=True,
                        help="Run even when the estimated memory or time exceeds the "
                             "limits.")(func)
    return click.option("--max-memory", type=MemorySize(), default=None, metavar="SIZE",
                        help="Refuse work estimated to need more memory (e.g. 4G; default "
                             "half the machine's RAM).")(func)


def guard(estimate, max_memory, force, *, announce_from: float = 10.0) -> None:
    """Refuse ``estimate`` beyond the limits (exit 2); print it when it is long.

    Parameters
    ----------
    estimate : crn.guards.Estimate
    max_memory : int or None
        ``--max-memory`` in bytes (None: half the RAM).
    force : bool
        ``--force``: never refuse.
    announce_from : float, default 10
        Print the estimate on standard error from this many seconds.
    """
    from ..guards import enforce

    enforce(estimate, max_memory=max_memory, force=force)
    if estimate.seconds >= announce_from:
        click.echo(f"crn: estimated work for {estimate.what}: {estimate.describe()}", err=True)
