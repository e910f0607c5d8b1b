"""``--to FORMAT`` and ``-o FILE``: a network exported as text, JSON, SBML or LaTeX.

Shared by ``translate`` (the model's network) and ``implement`` (its DNA
implementation): the two options, the check that ``--json`` leaves standard
output to the JSON object, and where the export goes.
"""

from __future__ import annotations

import click

from crn.commands.options import OUTPUT_FILE, emit_json

__all__ = ["FORMATS", "export_options", "check_export_json", "deliver_export"]

#: The formats of ``--to``; the same as the keys of :data:`crn.io.exports.FORMATS`
#: (kept here so that ``crn --help`` needs no numpy).
FORMATS = ("text", "json", "sbml", "latex")


def export_options(default: str):
    """Add ``--to FORMAT`` (passed as ``fmt``, None for text) and ``-o/--output FILE``
    (``output``); ``default`` is the help's words on the default format."""
    def decorate(func):
        func = click.option("-o", "--output", "output", type=OUTPUT_FILE, default=None,
                            help="Write the export to FILE (atomically) instead of standard "
                                 "output.")(func)
        return click.option("--to", "fmt", type=click.Choice(list(FORMATS)), default=None,
                            help=f"Export format ({default}).")(func)

    return decorate


def check_export_json(as_json: bool, output: str | None, fmt: str | None) -> None:
    """Refuse ``--json`` with another ``--to`` format on standard output (a usage error)."""
    if as_json and output is None and fmt not in (None, "json"):
        raise click.UsageError(f"--json prints the JSON object; give -o FILE for --to {fmt}")


def deliver_export(text: str, net, *, fmt: str, output: str | None, as_json: bool,
                   json_obj: dict | None) -> None:
    """Write the export to ``output`` (saying so on standard error unless ``--json``) or print
    it; with ``--json`` print ``json_obj`` (built only then) instead."""
    from crn.io.atomic import write_atomic

    if output is not None:
        write_atomic(output, text)
        if not as_json:
            click.echo(f"wrote {output} ({fmt}: {net.n_species} species, "
                       f"{net.n_reactions} reactions)", err=True)
    if as_json:
        emit_json(json_obj)
    elif output is None:
        click.echo(text, nl=False)
