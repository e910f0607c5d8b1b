"""The ``crn`` command line: turns options into library calls, library errors into exit 2.

Each command lives in :mod:`crn.commands`; this module holds the group, the
options every command shares, and the one place where errors become a
one-line message and exit status 2.
"""

from __future__ import annotations

import json
import sys

import click
import numpy as np

from .errors import CRNError
from .io.models import load_model
from .model import parse_overrides

__all__ = ["cli", "main", "model_argument", "set_option", "seed_option", "json_option",
           "load", "emit_json", "progress_bar", "to_jsonable"]

EXIT_BAD_INPUT = 2


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="crn")
def cli():
    """Population protocols as chemical reaction networks: mean field, exact
    stochastic dynamics and exact small-population analysis side by side."""


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


def to_jsonable(value):
    """Convert numpy scalars and arrays (and NaN/inf) into plain JSON values."""
    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [to_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return to_jsonable(value.tolist())
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        value = float(value)
        return value if np.isfinite(value) else None
    if isinstance(value, np.bool_):
        return bool(value)
    return value


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


def _register():
    from .commands import COMMANDS

    for command in COMMANDS:
        cli.add_command(command)


_register()


def main(argv=None) -> int:
    """Entry point of the ``crn`` console script: exit 0, or 2 with a one-line error."""
    try:
        code = cli.main(args=argv, prog_name="crn", standalone_mode=False)
    except click.exceptions.Abort:
        click.echo("crn: interrupted", err=True)
        return 130
    except click.exceptions.Exit as done:
        return done.exit_code
    except click.ClickException as err:
        if type(err).__name__ == "NoArgsIsHelpError":  # bare `crn`: show the help as it is
            click.echo(err.format_message(), err=True)
        else:
            click.echo(f"crn: {_one_line(err.format_message())}", err=True)
        return EXIT_BAD_INPUT
    except CRNError as err:
        click.echo(f"crn: {_one_line(str(err))}", err=True)
        return EXIT_BAD_INPUT
    return code if isinstance(code, int) else 0


def _one_line(text: str) -> str:
    return " ".join(text.split())


if __name__ == "__main__":
    sys.exit(main())
