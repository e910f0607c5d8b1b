"""Options and helpers every command shares: model loading, JSON output, progress bars."""

from __future__ import annotations

import json
import sys

import click

__all__ = ["model_argument", "set_option", "seed_option", "json_option", "load", "emit_json",
           "progress_bar", "counting", "to_jsonable", "seed_notice", "lab_time_options",
           "seconds_per_time",
           "OUTPUT_FILE", "FIGURE_FILE", "FIGURE_FORMATS", "CLUSTER_ADDRESS", "dna_options",
           "dna_parameters", "dna_errors", "build_implementation", "DNA_OPTION_NAMES",
           "DEFAULT_DNA_RATE", "DEFAULT_DNA_CONCENTRATION", "every_option", "force_option",
           "sample_times_option_value",
           "stop_interrupted", "guard_options", "guard", "RenamedOption", "deprecation_notice"]

#: Figure formats ``--plot`` accepts (all written by matplotlib's Agg, PDF, SVG and PS backends).
FIGURE_FORMATS = ("png", "pdf", "svg", "svgz", "eps", "ps", "jpg", "jpeg", "tif", "tiff", "webp")


def deprecation_notice(old: str, new: str) -> None:
    """Tell the user, in one line on standard error, that option ``old`` is now ``new``.

    Parameters
    ----------
    old, new : str
        The old and the new spelling, e.g. ``"--max-n"`` and ``"--n-max"``.
    """
    click.echo(f"crn: warning: {old} is deprecated and will be removed in the next release; "
               f"use {new}", err=True)


class RenamedOption(click.Option):
    """An option whose earlier spellings still work for one release, with a warning.

    ``click.option("--n-max", "n_max", cls=RenamedOption, old=("--max-n",), ...)``
    accepts ``--max-n`` as well: the value goes to the same parameter, the
    help shows only the new spelling, and each use of an old spelling prints
    :func:`deprecation_notice`. When both spellings are given the new one wins.

    Parameters
    ----------
    param_decls : sequence of str
        As for :class:`click.Option`.
    old : sequence of str
        The earlier spellings (value options only, not flags).
    **attrs
        As for :class:`click.Option`.
    """

    def __init__(self, param_decls=None, *, old=(), **attrs):
        super().__init__(param_decls, **attrs)
        if self.is_flag:
            raise TypeError("RenamedOption is for options that take a value")
        self.old_opts = tuple(old)

    def add_to_parser(self, parser, ctx) -> None:
        """Register the new spelling, then each old one under a destination of its own."""
        super().add_to_parser(parser, ctx)
        for k, opt in enumerate(self.old_opts):
            parser.add_option(obj=self, opts=[opt], dest=f"{self.name}__old{k}",
                              action="append" if self.multiple else "store", nargs=self.nargs)

    def consume_value(self, ctx, opts):
        """Take a value given under an old spelling (with the warning) unless the new
        spelling was given too."""
        for k, opt in enumerate(self.old_opts):
            dest = f"{self.name}__old{k}"
            if dest in opts:
                deprecation_notice(opt, self.opts[0])
                if self.name not in opts:
                    opts = {**opts, self.name: opts[dest]}
        return super().consume_value(ctx, opts)


_DECORATOR_DOC = """Add {adds} to a click command.

Parameters
----------
func : callable
    The command function to decorate.

Returns
-------
callable
    ``func`` with {them}, passed to it as {passed}.
"""


def _decorator(name: str, adds: str, passed: str, *params):
    """A command decorator applying click ``params`` (the first one outermost, so first in
    the help), documented as adding ``adds`` passed as ``passed``."""
    def decorate(func):
        for param in reversed(params):
            func = param(func)
        return func

    decorate.__name__ = decorate.__qualname__ = name
    decorate.__doc__ = _DECORATOR_DOC.format(adds=adds, passed=passed,
                                             them="them" if len(params) > 1 else "it")
    return decorate


model_argument = _decorator(
    "model_argument", "the ``MODEL`` argument (path of a model file)", "``model``",
    click.argument("model", type=click.Path(dir_okay=False)))

set_option = _decorator(
    "set_option", "the repeatable ``--set NAME=VALUE`` option", "``sets`` (tuple of str)",
    click.option("--set", "sets", multiple=True, metavar="NAME=VALUE",
                 help="Override a parameter of the model (repeatable)."))


def seed_option(func=None, *, workers: bool = True):
    """Add the ``--seed`` option (a non-negative int, default None) to a click command.

    Parameters
    ----------
    func : callable, optional
        The command function to decorate; without it, returns the decorator
        (``@seed_option(workers=False)``).
    workers : bool, default True
        Whether the command runs on several workers (the help then says the
        numbers do not depend on how many).

    Returns
    -------
    callable
        ``func`` with the option, passed to it as ``seed`` (int or None).
    """
    text = ("Root seed; the same seed gives the same numbers on any number of workers. "
            if workers else "Root seed; the same seed gives the same numbers. ")

    def decorate(f):
        return click.option("--seed", type=click.IntRange(min=0), default=None,
                            help=text + "Printed when not given.")(f)

    return decorate if func is None else decorate(func)


def seed_notice(entropy: int) -> None:
    """Tell the user, on standard error, the seed drawn because ``--seed`` was not given.

    Parameters
    ----------
    entropy : int
        Entropy of the root ``SeedSequence``; ``--seed entropy`` repeats the run.
    """
    click.echo(f"crn: seed {entropy} (pass --seed {entropy} to repeat)", err=True)


def lab_time_options(func):
    """Add ``--rate`` and ``--concentration`` (text, default None), which give time in minutes,
    to the click command ``func`` and return it.

    They are passed as ``rate`` and ``concentration`` (str or None);
    :func:`seconds_per_time` turns them into a time unit.
    """
    # a command that already has them (from dna_options) keeps its own: one option, one name
    present = {param.name for param in getattr(func, "__click_params__", ())}
    if "concentration" not in present:
        func = click.option("--concentration", default=None, metavar="C",
                            help="Total concentration of all agents, e.g. 10nM; with --rate "
                                 "the figure gets a second time axis in minutes.")(func)
    if "rate" not in present:
        func = click.option("--rate", default=None, metavar="K",
                            help="Bimolecular rate constant the reactions are built at, e.g. "
                                 "1e6/M/s; with --concentration the figure gets a second time "
                                 "axis in minutes.")(func)
    return func


def seconds_per_time(net, rate: str | None, concentration: str | None) -> float | None:
    """Seconds in one unit of parallel time, from ``--rate`` and ``--concentration``.

    One unit of parallel time lasts ``1 / (k C)`` seconds for a protocol whose
    reactions are built at ``k`` (/M/s) and total concentration ``C`` (M)
    (docs/design.md, physical units).

    Parameters
    ----------
    net : Network
        The model's network; only a protocol's time has this unit.
    rate, concentration : str or None
        The options as typed.

    Returns
    -------
    float or None
        None unless both are given.

    Raises
    ------
    CRNError
        When only one is given, a value cannot be read, or the model is not a protocol.
    """
    from crn.core.errors import CRNError
    from crn.core.units import parse_concentration, parse_rate_constant

    if rate is None and concentration is None:
        return None
    if rate is None or concentration is None:
        raise CRNError("give --rate and --concentration together (time in minutes needs both)")
    if not net.from_protocol:
        raise CRNError("--rate and --concentration convert parallel time; this model is a "
                       "reaction network, whose time unit is its own")
    return 1.0 / (parse_rate_constant(rate) * parse_concentration(concentration))


json_option = _decorator(
    "json_option", "the ``--json`` flag", "``as_json`` (bool)",
    click.option("--json", "as_json", is_flag=True,
                 help="Print one JSON object on standard output instead of tables."))


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
    from crn.core.model import parse_overrides
    from crn.io.models import load_model

    return load_model(model, parse_overrides(sets))


def to_jsonable(value):
    """:func:`crn.io.jsonable.to_jsonable`, imported on first use (it needs numpy)."""
    from crn.io.jsonable import to_jsonable as convert

    return convert(value)


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
            TextColumn,
            TimeElapsedColumn,
            TimeRemainingColumn,
        )

        with Progress("[progress.description]{task.description}", BarColumn(),
                      MofNCompleteColumn(), TimeElapsedColumn(), TextColumn("eta"),
                      TimeRemainingColumn(),
                      console=Console(stderr=True), transient=True) as progress:
            task = progress.add_task(description, total=total)

            def update(done, new_total=None):
                if new_total is not None:
                    progress.update(task, total=new_total)
                progress.update(task, completed=done)

            yield update

    return bar()


def counting(update, seen: list[int]):
    """A progress callback that passes each report on to ``update`` and keeps ``done`` in
    ``seen[0]``, so that an interruption can say how far the work got.

    Parameters
    ----------
    update : callable
        The callback of :func:`progress_bar`.
    seen : list of int
        One element, overwritten with each report's ``done``.

    Returns
    -------
    callable
        ``report(done, total=None)``.
    """
    def report(done, total=None):
        seen[0] = done
        update(done, total)

    return report


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


class FigureFile(OutputFile):
    """An :class:`OutputFile` whose suffix names a figure format matplotlib writes (or none:
    PNG), checked before any work starts."""

    name = "file"

    def convert(self, value, param, ctx):
        from pathlib import Path

        suffix = Path(value).suffix.lstrip(".").lower()
        if suffix and suffix not in FIGURE_FORMATS:
            self.fail(f"{value!r}: cannot write a figure as .{suffix}; use one of "
                      f"{', '.join(FIGURE_FORMATS)}", param, ctx)
        return super().convert(value, param, ctx)


FIGURE_FILE = FigureFile()


class ClusterAddress(click.ParamType):
    """A Dask scheduler address, ``[tcp|tls]://HOST:PORT`` (or ``HOST:PORT``), checked (and,
    for TCP, reached) before any work starts."""

    name = "address"
    schemes = ("tcp", "tls")

    def convert(self, value, param, ctx):
        from urllib.parse import urlsplit

        from crn.core.errors import CRNError
        from crn.solvers.simulate import probe_scheduler

        parts = urlsplit(value if "://" in value else f"tcp://{value}")
        try:
            port = parts.port
        except ValueError:
            port = None
        if parts.scheme not in self.schemes or not parts.hostname or port is None \
                or parts.path not in ("", "/"):
            self.fail(f"{value!r} is not a scheduler address; expected tcp://HOST:PORT "
                      f"(or tls://HOST:PORT)", param, ctx)
        try:
            probe_scheduler(value)
        except CRNError as err:
            self.fail(str(err), param, ctx)
        return value


CLUSTER_ADDRESS = ClusterAddress()


#: Defaults of ``--rate`` and ``--concentration`` for a DNA implementation: formal rate 1
#: built at 1e5 /M/s, signals at 10 nM in total (common practice for strand-displacement
#: circuits: signals at nM to tens of nM, gates in excess, displacement rates of
#: 1e5-1e6 /M/s; Soloveichik, Seelig & Winfree, PNAS 107:5393, 2010, from memory).
DEFAULT_DNA_RATE = "1e5/M/s"
DEFAULT_DNA_CONCENTRATION = "10nM"
#: DnaParameters field -> the command-line option that sets it.
DNA_OPTION_NAMES = {"rate": "--rate", "concentration": "--concentration", "fuel": "--fuel",
                    "max_rate": "--max-rate", "toehold": "--toehold", "leak": "--leak"}


def dna_options(func=None, *, scale: bool = True):
    """Add the DNA-implementation parameter options to a click command.

    ``--fuel``, ``--max-rate``, ``--toehold`` and ``--leak`` (passed as ``fuel``,
    ``max_rate``, ``toehold``, ``leak``), and with ``scale`` also ``--rate`` and
    ``--concentration`` (``rate``, ``concentration``; leave them out for a command
    that has its own). Values stay text: :func:`dna_parameters` parses them.

    Parameters
    ----------
    func : callable, optional
        The command function; without it, returns the decorator.
    scale : bool, default True
        Whether to add ``--rate`` and ``--concentration``.

    Returns
    -------
    callable
    """
    def decorate(f):
        options = [
            click.option("--fuel", default=None, metavar="C",
                         help="Initial concentration of each fuel and gate species, e.g. 1uM "
                              "(default 100 times --concentration)."),
            click.option("--max-rate", "max_rate", default=None, metavar="K",
                         help="Fastest strand-displacement rate constant, e.g. 1e6/M/s "
                              "(default from --toehold)."),
            click.option("--toehold", type=click.IntRange(0, 30), default=None, metavar="NT",
                         help="Toehold length in nucleotides, instead of --max-rate "
                              "(default 7: about 6e6 /M/s, Zhang & Winfree 2009)."),
            click.option("--leak", default=None, metavar="K",
                         help="Leak rate constant of the fuel-fuel reaction that releases an "
                              "output without its input, e.g. 10/M/s (default 0)."),
        ]
        if scale:
            options += [
                click.option("--rate", default=None, metavar="K",
                             help="Rate constant one unit of formal rate stands for "
                                  f"(default {DEFAULT_DNA_RATE})."),
                click.option("--concentration", default=None, metavar="C",
                             help="Total signal concentration the population stands for "
                                  f"(default {DEFAULT_DNA_CONCENTRATION})."),
            ]
        for option in reversed(options):
            f = option(f)
        return f

    return decorate if func is None else decorate(func)


def _bad(option: str, message: str):
    return click.BadParameter(message, param_hint=f"'{option}'")


def _leak(text: str) -> float:
    from crn.core.errors import CRNError
    from crn.core.units import parse_rate_constant

    try:
        return parse_rate_constant(text)
    except CRNError as err:
        # 0 (bare or with a rate unit) turns the leak off; anything else keeps the error
        number, _, unit = text.strip().partition("/")
        try:
            zero = float(number) == 0.0
        except ValueError:
            zero = False
        if zero and (not unit or _is_rate_unit("/" + unit)):
            return 0.0
        if number.strip().startswith("-"):
            raise _bad("--leak", f"the leak rate constant must be >= 0, got {text!r}") from None
        raise _bad("--leak", str(err)) from None


def _is_rate_unit(unit: str) -> bool:
    from crn.core.errors import CRNError
    from crn.core.units import parse_rate_constant

    try:
        parse_rate_constant("1" + unit)
    except CRNError:
        return False
    return True


def dna_parameters(*, rate=None, concentration=None, fuel=None, max_rate=None, toehold=None,
                   leak=None):
    """Turn the DNA options into :class:`crn.dna.DnaParameters`.

    Parameters
    ----------
    rate, max_rate, leak : str, float or None
        Rate constants as text with a unit (``1e6/M/s``) or already in /M/s;
        ``leak`` may be 0.
    concentration, fuel : str, float or None
        Concentrations as text with a unit (``10nM``) or already in M.
    toehold : int or None

    Returns
    -------
    DnaParameters

    Raises
    ------
    click.BadParameter
        Naming the option, for a unit that is not a rate or concentration or an
        impossible value.
    """
    from crn.core.errors import CRNError
    from crn.core.units import parse_concentration, parse_rate_constant
    from crn.dna import DnaParameterError, DnaParameters

    def read(value, option, parse, default=None):
        if value is None:
            value = default
        if value is None or not isinstance(value, str):
            return value
        try:
            return parse(value)
        except CRNError as err:
            raise _bad(option, str(err)) from None

    values = dict(
        rate=read(rate, "--rate", parse_rate_constant, DEFAULT_DNA_RATE),
        concentration=read(concentration, "--concentration", parse_concentration,
                           DEFAULT_DNA_CONCENTRATION),
        fuel=read(fuel, "--fuel", parse_concentration),
        max_rate=read(max_rate, "--max-rate", parse_rate_constant),
        toehold=toehold,
        leak=0.0 if leak is None else (_leak(leak) if isinstance(leak, str) else leak),
    )
    try:
        return DnaParameters(**values)
    except DnaParameterError as err:
        raise _bad(DNA_OPTION_NAMES.get(err.field, err.field), str(err)) from None


def dna_errors():
    """Context manager: a DnaParameterError raised inside becomes a usage error naming the option.

    Use it around :func:`crn.dna.implement`, whose impossible-rate errors name the
    parameter field.
    """
    from contextlib import contextmanager

    @contextmanager
    def guard():
        from crn.dna import DnaParameterError

        try:
            yield
        except DnaParameterError as err:
            raise _bad(DNA_OPTION_NAMES.get(err.field, err.field), str(err)) from None

    return guard()


def build_implementation(formal, scheme: str, params, option: str = "--scheme"):
    """:func:`crn.dna.implement` with command-line errors.

    An impossible parameter becomes a usage error naming its option; a formal
    reaction the scheme cannot build becomes a one-line error starting with
    ``OPTION SCHEME:`` (``--scheme ssw:`` here, ``--implement ssw:`` elsewhere).

    Parameters
    ----------
    formal : Network
    scheme : str
    params : DnaParameters
    option : str, default "--scheme"
        The option that chose the scheme, named in the error.

    Returns
    -------
    Implementation
    """
    from crn.core.errors import CRNError
    from crn.dna import DnaParameterError, implement

    with dna_errors():
        try:
            return implement(formal, scheme, params)
        except DnaParameterError:
            raise
        except CRNError as err:
            raise CRNError(f"{option} {scheme}: {err}") from None


every_option = _decorator(
    "every_option", "``--every DT`` (sample interval of a time course, default None)",
    "``every`` (float or None)",
    click.option("--every", type=float, default=None, metavar="DT",
                 help="Record a time course every DT time units up to --until and report it "
                      "(mean, sd, 5% and 95% quantiles per species)."))

_FORCE = click.option("--force", is_flag=True,
                      help="Go ahead even past a limit: more estimated memory than "
                           "--max-memory, more than a day of estimated work, more than "
                           "1,000,000 sample times.")

force_option = _decorator("force_option", "the ``--force`` flag (go ahead past a size limit)",
                          "``force`` (bool)", _FORCE)


def sample_times_option_value(every: float, until: float, force: bool):
    """The sample times of ``--every`` up to ``until``, or a one-line ``--every`` error.

    Parameters
    ----------
    every : float
    until : float
    force : bool

    Returns
    -------
    ndarray of float64

    Raises
    ------
    click.BadParameter
        For an interval that is not positive, longer than the horizon, or
        makes more sample times than :data:`crn.solvers.time_course.MAX_SAMPLES`
        without ``--force``.
    """
    from crn.solvers.time_course import sample_times

    try:
        return sample_times(every, until, force=force)
    except ValueError as err:
        raise click.BadParameter(str(err), param_hint="--every") from err


def stop_interrupted(finished: str):
    """After Ctrl-C or SIGTERM: say what was finished on standard error and exit 130 or 143.

    Parameters
    ----------
    finished : str
        What the command had finished, e.g. ``"after n = 2..7 (no counterexample so far)"``.
    """
    from crn.runtime import interrupts

    click.echo(f"crn: {interrupts.reason()} {finished}", err=True)
    click.get_current_context().exit(interrupts.exit_status())


class MemorySize(click.ParamType):
    """A size in bytes: ``4G``, ``512MiB``, ``2.5GB``."""

    name = "size"

    def convert(self, value, param, ctx):
        from crn.core.errors import CRNError
        from crn.runtime.guards import parse_memory

        try:
            return parse_memory(value)
        except CRNError as err:
            self.fail(str(err).removeprefix("--max-memory: "), param, ctx)


guard_options = _decorator(
    "guard_options", "``--max-memory SIZE`` and ``--force`` (see :mod:`crn.runtime.guards`)",
    "``max_memory`` (int bytes or None) and ``force`` (bool)",
    click.option("--max-memory", type=MemorySize(), default=None, metavar="SIZE",
                 help="Refuse work estimated to need more memory (e.g. 4G; default half the "
                      "machine's RAM)."),
    _FORCE)


def guard(estimate, max_memory, force, *, announce: bool = True,
          announce_from: float = 10.0) -> None:
    """Refuse ``estimate`` beyond the limits (exit 2); print it when it is long.

    Parameters
    ----------
    estimate : crn.runtime.guards.Estimate
    max_memory : int or None
        ``--max-memory`` in bytes (None: half the RAM).
    force : bool
        ``--force``: never refuse.
    announce : bool, default True
        Whether to print a long estimate (not with ``--json``).
    announce_from : float, default 10
        Print the estimate on standard error from this many seconds.
    """
    from crn.runtime.guards import enforce

    enforce(estimate, max_memory=max_memory, force=force)
    if announce and estimate.seconds >= announce_from:
        click.echo(f"crn: estimated work for {estimate.what}: {estimate.describe()}", err=True)
