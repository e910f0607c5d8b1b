"""Options and helpers every command shares: model loading, JSON output, progress bars."""

from __future__ import annotations

import json
import sys

import click

from ..io.jsonable import to_jsonable
from ..io.models import load_model
from ..model import parse_overrides

__all__ = ["model_argument", "set_option", "seed_option", "json_option", "load", "emit_json",
           "progress_bar", "to_jsonable", "OUTPUT_FILE"]


def model_argument(func):
    return click.argument("model", type=click.Path(dir_okay=False))(func)


def set_option(func):
    return click.option("--set", "sets", multiple=True, metavar="NAME=VALUE",
                        help="Override a parameter of the model (repeatable).")(func)


def seed_option(func):
    return click.option("--seed", type=click.IntRange(min=0), default=None,
                        help="Root seed; the same seed gives the same numbers on any number "
                             "of workers. Printed when not given.")(func)


def json_option(func):
    return click.option("--json", "as_json", is_flag=True,
                        help="Print one JSON object on standard output instead of tables.")(func)


def load(model: str, sets):
    """Load a model file with ``--set`` overrides (errors propagate as CRNError)."""
    return load_model(model, parse_overrides(sets))


def emit_json(obj) -> None:
    """Write one JSON object on standard output."""
    click.echo(json.dumps(to_jsonable(obj), indent=2))


def progress_bar(description: str, total: int | None, enabled: bool = True):
    """A rich progress bar on standard error, or a no-op when disabled (``--json``).

    Returns a context manager yielding ``advance(k=1)``-style callback ``update(done, total)``.
    """
    from contextlib import contextmanager

    @contextmanager
    def bar():
        if not enabled or not sys.stderr.isatty() and not _force_progress():
            yield lambda done, total=None: None
            return
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TimeElapsedColumn

        with Progress("[progress.description]{task.description}", BarColumn(),
                      MofNCompleteColumn(), TimeElapsedColumn(),
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
