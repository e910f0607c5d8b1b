"""The ``crn`` command line: turns options into library calls, library errors into exit 2.

Each command lives in :mod:`crn.commands` (shared options in
:mod:`crn.commands.options`); this module holds the group and the one place
where errors become a one-line message and exit status 2.
"""

from __future__ import annotations

import contextlib
import sys

import click

from crn import __version__
from crn.core.errors import CRNError, WorkerError

__all__ = ["cli", "main"]

EXIT_BAD_INPUT = 2
EXIT_FAILED = 1
_PACKAGE_DIR = __file__.rsplit("/", 1)[0]


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(version=__version__, prog_name="crn")
def cli():
    """Population protocols as chemical reaction networks: mean field, exact
    stochastic dynamics and exact small-population analysis side by side."""


def _register():
    from crn.commands import COMMANDS

    for command in COMMANDS:
        cli.add_command(command)


_register()


def main(argv=None) -> int:
    """Entry point of the ``crn`` console script.

    Exit 0; 1 when the work itself failed (lost worker processes); 2 with a
    one-line error for bad input; 130 after Ctrl-C and 143 after SIGTERM (both
    stop the command the same way, see :mod:`crn.runtime.interrupts`).
    """
    import warnings

    from crn.runtime import interrupts

    with warnings.catch_warnings(), interrupts.handling():
        warnings.showwarning = _show_warning
        code = _run(argv)
    if argv is None and interrupts.received() is not None:
        # the real command line after Ctrl-C/SIGTERM: results are saved and streams flushed
        # below, so skip the interpreter's slow teardown (numba, dask) to stop at once
        import os

        if "multiprocessing" in sys.modules:  # release the pools' semaphores quietly
            with contextlib.suppress(Exception):
                sys.modules["multiprocessing"].util._exit_function()
        for stream in (sys.stdout, sys.stderr):
            with contextlib.suppress(Exception):
                stream.flush()
        os._exit(code)
    return code


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """Our own warnings as one line on standard error; other libraries' warnings stay quiet."""
    from crn.core.model import ModelWarning

    if issubclass(category, ModelWarning) or filename.startswith(_PACKAGE_DIR):
        click.echo(f"crn: warning: {_one_line(str(message))}", err=True)


def _run(argv) -> int:
    try:
        code = cli.main(args=argv, prog_name="crn", standalone_mode=False)
    except (click.exceptions.Abort, KeyboardInterrupt):
        from crn.runtime import interrupts

        click.echo(f"crn: {interrupts.reason()}", err=True)
        return interrupts.exit_status()
    except click.exceptions.Exit as done:
        return done.exit_code
    except click.ClickException as err:
        if type(err).__name__ == "NoArgsIsHelpError":  # bare `crn`: show the help as it is
            click.echo(err.format_message(), err=True)
        else:
            click.echo(f"crn: {_one_line(err.format_message())}", err=True)
        return EXIT_BAD_INPUT
    except RecursionError:
        click.echo("crn: the input is nested too deeply to read", err=True)
        return EXIT_BAD_INPUT
    except WorkerError as err:
        click.echo(f"crn: {_one_line(str(err))}", err=True)
        return EXIT_FAILED
    except CRNError as err:
        click.echo(f"crn: {_one_line(str(err))}", err=True)
        return EXIT_BAD_INPUT
    return code if isinstance(code, int) else 0


def _one_line(text: str) -> str:
    return " ".join(text.split())


if __name__ == "__main__":
    sys.exit(main())
