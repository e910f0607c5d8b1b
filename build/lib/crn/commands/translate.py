"""``crn translate``: a model's reaction network as text, JSON, SBML or LaTeX."""

from __future__ import annotations

import click

from crn.commands.options import (
    OUTPUT_FILE,
    emit_json,
    json_option,
    load,
    model_argument,
    set_option,
)
from crn.core.errors import CRNError
from crn.io.atomic import write_atomic

__all__ = ["translate"]

#: The formats of ``--to``; the same as the keys of :data:`crn.io.exports.FORMATS`
#: (kept here so that ``crn --help`` needs no numpy).
FORMATS = ("text", "json", "sbml", "latex")


@click.command("translate")
@model_argument
@set_option
@click.option("--to", "fmt", type=click.Choice(list(FORMATS)), default=None,
              help="Export format (default text).")
@click.option("-o", "--output", "output", type=OUTPUT_FILE, default=None,
              help="Write the export to FILE (atomically) instead of standard output.")
@json_option
def translate(model, sets, fmt, output, as_json):
    """Translate MODEL (a protocol or a network) into its reaction network.

    A protocol becomes the bimolecular network whose stochastic kinetics at
    volume n - 1 is exactly the protocol, with network time = parallel time.
    """
    if as_json and output is None and fmt not in (None, "json"):
        raise click.UsageError(f"--json prints the JSON object; give -o FILE for --to {fmt}")
    from crn.io.contract import network_to_dict
    from crn.io.exports import export_network

    fmt = fmt or "text"
    net = load(model, sets).network
    text = export_network(net, fmt)
    if fmt == "sbml":
        from crn.io.sbml import sbml_consistency

        errors, _ = sbml_consistency(text)
        if errors:
            raise CRNError(f"the SBML export fails libsbml's consistency check: {errors[0]}")
    if output is not None:
        write_atomic(output, text)
        if not as_json:
            click.echo(f"wrote {output} ({fmt}: {net.n_species} species, "
                       f"{net.n_reactions} reactions)", err=True)
    if as_json:
        emit_json(network_to_dict(net))
    elif output is None:
        click.echo(text, nl=False)
