"""``--implement SCHEME``: run a command's analysis on the DNA implementation of the model.

Shared by ``ode``, ``ssa``, ``compare``, ``exact``, ``regimes`` and ``copies``:
the option itself, the check that DNA parameter options come with it, and the
pieces of JSON every command adds (the scheme, the parameters in lab units,
the fuel left).
"""

from __future__ import annotations

import click

from ..errors import CRNError
from . import options as _options

__all__ = ["implement_option", "dna_options", "dna_only_options", "dna_settings",
           "implementation_json", "format_fuel", "DNA_OPTIONS"]

#: DNA parameter options (keyword name -> option as typed).
DNA_OPTIONS = {"fuel": "--fuel", "max_rate": "--max-rate", "toehold": "--toehold",
               "leak": "--leak", "rate": "--rate", "concentration": "--concentration"}


def implement_option(func):
    """Add ``--implement SCHEME`` (passed as ``implement``, None when not given)."""
    return click.option(
        "--implement", "implement", default=None, metavar="SCHEME",
        help="Run on the DNA strand-displacement implementation (ssw or two-domain; see "
             "`crn implement`) instead of the formal network: same time unit, decisions from "
             "the signal species.")(func)


def dna_only_options(func):
    """The DNA options a command without its own ``--rate``/``--concentration`` lacks:
    ``--fuel``, ``--max-rate``, ``--toehold``, ``--leak``."""
    opts = [
        click.option("--fuel", default=None, metavar="C",
                     help="With --implement: concentration of each fuel/gate species, e.g. "
                          "1uM (default 100 times the signal concentration)."),
        click.option("--max-rate", "max_rate", default=None, metavar="K",
                     help="With --implement: largest strand-displacement rate constant, "
                          "e.g. 6e6/M/s (default from the toehold)."),
        click.option("--toehold", type=int, default=None, metavar="NT",
                     help="With --implement: toehold length in nucleotides (instead of "
                          "--max-rate)."),
        click.option("--leak", default=None, metavar="K",
                     help="With --implement: leak rate constant of the gates, e.g. 10/M/s "
                          "(default 0)."),
    ]
    for option in reversed(opts):
        func = option(func)
    return func


def dna_options(func):
    """All DNA parameter options, ``--rate`` and ``--concentration`` included.

    Uses :func:`crn.commands.options.dna_options` when that exists (the
    ``crn implement`` command's own), so every command spells them alike.
    """
    shared = getattr(_options, "dna_options", None)
    if shared is not None:
        return shared(func)
    func = dna_only_options(func)
    func = click.option("--concentration", default=None, metavar="C",
                        help="With --implement: total signal concentration the population "
                             "stands for, e.g. 10nM.")(func)
    return click.option("--rate", default=None, metavar="K",
                        help="With --implement: rate constant one unit of formal rate stands "
                             "for, e.g. 1e6/M/s.")(func)


def _leak(text: str) -> float:
    from ..units import parse_rate_constant

    try:
        return parse_rate_constant(text)
    except CRNError:
        number = text.strip().split("/")[0].split()[0] if text.strip() else text
        try:
            zero = float(number) == 0.0
        except ValueError:
            zero = False
        if zero:
            if text.strip() != number:
                parse_rate_constant("1" + text.strip()[len(number):])  # the unit must be valid
            return 0.0
        raise


def _parse(name: str, text):
    from ..units import parse_concentration, parse_rate_constant

    if text is None:
        return None
    try:
        if name in ("fuel", "concentration"):
            return parse_concentration(text)
        if name == "leak":
            return _leak(text)
        if name == "toehold":
            return int(text)
        return parse_rate_constant(text)
    except CRNError as err:
        raise CRNError(f"{DNA_OPTIONS[name]}: {err}") from None


def dna_settings(implement: str | None, *, concentration_optional: bool = False, **given):
    """Check ``--implement`` and the DNA options; return ``(scheme, DnaParameters)`` or None.

    Parameters
    ----------
    implement : str or None
        The scheme given to ``--implement``.
    concentration_optional : bool
        When True a missing ``--concentration`` is allowed (``copies --volume``:
        the concentration follows n); a placeholder of 1 M is used and the
        caller replaces it per cell.
    **given
        The DNA options as typed (text), by keyword name (``fuel``,
        ``max_rate``, ``toehold``, ``leak``, ``rate``, ``concentration``).

    Returns
    -------
    (str, crn.dna.DnaParameters) or None
        None without ``--implement``.

    Raises
    ------
    CRNError
        One line naming the option: a DNA option without ``--implement``, an
        unknown scheme, a missing ``--rate`` or ``--concentration``, or a value
        out of range.
    """
    if implement is None:
        for name in ("fuel", "max_rate", "toehold", "leak"):
            if given.get(name) is not None:
                raise CRNError(f"{DNA_OPTIONS[name]} needs --implement SCHEME")
        return None
    from ..dna import SCHEMES, DnaParameterError, DnaParameters

    if implement not in SCHEMES:
        raise CRNError(f"--implement: unknown scheme {implement!r}; choose "
                       f"{', '.join(SCHEMES)}")
    values = {name: _parse(name, text) for name, text in given.items()}
    if values.get("rate") is None:
        raise CRNError("--implement needs --rate (the rate constant one unit of formal rate "
                       "stands for, e.g. 1e6/M/s)")
    if values.get("concentration") is None:
        if not concentration_optional:
            raise CRNError("--implement needs --concentration (the total signal concentration "
                           "the population stands for, e.g. 10nM)")
        values["concentration"] = None
    leak = values.pop("leak", None)
    try:
        params = DnaParameters(
            rate=values["rate"],
            concentration=values["concentration"] if values["concentration"] is not None
            else _placeholder(values),
            fuel=values.get("fuel"), max_rate=values.get("max_rate"),
            toehold=values.get("toehold"), leak=0.0 if leak is None else leak)
    except DnaParameterError as err:
        raise CRNError(f"{DNA_OPTIONS.get(err.field, err.field)}: {err}") from None
    return implement, params


def _placeholder(values) -> float:
    # below any given fuel, so the fuel check passes until the real concentration is set
    fuel = values.get("fuel")
    return 1e-9 if fuel is None else fuel / 10.0


def implementation_errors(func, *args, **kwargs):
    """Call ``func``; a DNA parameter error becomes a one-line error naming the option."""
    from ..dna import DnaParameterError

    try:
        return func(*args, **kwargs)
    except DnaParameterError as err:
        raise CRNError(f"{DNA_OPTIONS.get(err.field, err.field)}: {err}") from None


def implement_network(formal, settings):
    """The :class:`crn.dna.Implementation` of ``formal`` for ``(scheme, params)``."""
    from ..implemented import implementation_of

    scheme, params = settings
    return implementation_errors(implementation_of, formal, scheme, params)


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
