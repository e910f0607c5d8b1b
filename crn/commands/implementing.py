"""``--implement SCHEME``: run a command's analysis on the DNA implementation of the model.

Shared by ``ode``, ``ssa``, ``compare``, ``exact``, ``regimes`` and ``copies``:
the option itself, the check that DNA parameter options come with it, and the
pieces of JSON every command adds (the scheme, the parameters in lab units,
the fuel left).
"""

from __future__ import annotations

import click

from crn.commands import options as _options
from crn.core.errors import CRNError

__all__ = ["implement_option", "implementation_options", "dna_settings",
           "implementation_json", "format_fuel", "DNA_OPTIONS"]

#: DNA parameter options (keyword name -> option as typed).
DNA_OPTIONS = _options.DNA_OPTION_NAMES


def implement_option(func):
    """Add ``--implement SCHEME`` (passed as ``implement``, None when not given)."""
    return click.option(
        "--implement", "implement", default=None, metavar="SCHEME",
        help="Run on the DNA strand-displacement implementation (ssw or two-domain; see "
             "`crn implement`) instead of the formal network: same time unit, decisions from "
             "the signal species.")(func)


def implementation_options(func=None, *, scale: bool = True):
    """Add ``--implement SCHEME`` and the DNA parameter options after it
    (:func:`crn.commands.options.dna_options`, spelled as in ``crn implement``);
    :func:`dna_settings` reads them.

    Parameters
    ----------
    func : callable, optional
        The command function; without it, returns the decorator
        (``@implementation_options(scale=False)``).
    scale : bool, default True
        Whether to add ``--rate`` and ``--concentration`` too (not for a command
        that has its own, ``copies``).

    Returns
    -------
    callable
    """
    def decorate(f):
        return implement_option(_options.dna_options(f, scale=scale))

    return decorate if func is None else decorate(func)


def dna_settings(implement: str | None, **given):
    """Check ``--implement`` and the DNA options; return ``(scheme, DnaParameters)`` or None.

    Parameters
    ----------
    implement : str or None
        The scheme given to ``--implement``.
    **given
        The DNA options as typed (text), by keyword name (``fuel``,
        ``max_rate``, ``toehold``, ``leak``, ``rate``, ``concentration``);
        ``rate`` and ``concentration`` default as in ``crn implement``.

    Returns
    -------
    (str, crn.dna.DnaParameters) or None
        None without ``--implement``.

    Raises
    ------
    CRNError or click.BadParameter
        One line naming the option: a DNA option without ``--implement``, an
        unknown scheme, or a value out of range.
    """
    if implement is None:
        for name in ("fuel", "max_rate", "toehold", "leak"):
            if given.get(name) is not None:
                raise CRNError(f"{DNA_OPTIONS[name]} needs --implement SCHEME")
        return None
    from crn.dna import SCHEMES

    if implement not in SCHEMES:
        raise CRNError(f"--implement: unknown scheme {implement!r}; choose "
                       f"{', '.join(SCHEMES)}")
    return implement, _options.dna_parameters(**given)


def implementation_errors(func, *args, **kwargs):
    """Call ``func``; a DNA parameter error becomes a one-line error naming the option."""
    from crn.dna import DnaParameterError

    try:
        return func(*args, **kwargs)
    except DnaParameterError as err:
        raise CRNError(f"{DNA_OPTIONS.get(err.field, err.field)}: {err}") from None


def implement_network(formal, settings):
    """The :class:`crn.dna.Implementation` of ``formal`` for ``(scheme, params)``, for analysis.

    Errors name ``--implement SCHEME`` or the parameter's option; the network's
    intermediates report what they hold (:mod:`crn.dna.labels`), as ``crn implement``
    shows.
    """
    scheme, params = settings
    return _options.build_implementation(formal, scheme, params, option="--implement")


def implementation_json(impl) -> dict:
    """``{scheme, parameters, roles_count, formal_species}`` describing an implementation."""
    counts = {}
    for role in impl.roles.values():
        counts[role] = counts.get(role, 0) + 1
    return {"scheme": impl.scheme, "parameters": impl.params.as_dict(),
            "species": impl.network.n_species, "reactions": impl.network.n_reactions,
            "roles": counts, "seconds_per_time_unit": impl.params.seconds_per_time_unit}


def format_fuel(fuel: dict) -> str:
    """``fuel left: least 97.1% (L_r1), mean 99.0%`` or ``fuel left: -``."""
    if not fuel:
        return "fuel left: -"
    low = min(fuel, key=fuel.get)
    mean = sum(fuel.values()) / len(fuel)
    return f"fuel left: least {fuel[low]:.1%} ({low}), mean {mean:.1%} over {len(fuel)} species"
