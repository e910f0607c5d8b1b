"""``crn implement``: the DNA strand-displacement implementation of a model's network."""

from __future__ import annotations

import click

from crn.commands.options import (
    OUTPUT_FILE,
    build_implementation,
    dna_options,
    dna_parameters,
    emit_json,
    json_option,
    load,
    model_argument,
    set_option,
)
from crn.commands.translate import FORMATS  # the export formats, without importing the exporters
from crn.io.atomic import write_atomic

__all__ = ["implement"]


@click.command("implement")
@model_argument
@set_option
@click.option("--scheme", type=click.Choice(["ssw", "two-domain"]), default="ssw",
              show_default=True,
              help="ssw: three-domain fuel construction (Soloveichik, Seelig & Winfree 2010); "
                   "two-domain: join-fork gates (Cardelli 2013).")
@dna_options
@click.option("--to", "fmt", type=click.Choice(list(FORMATS)), default=None,
              help="Export format (default text: grouped by role, rates in lab units).")
@click.option("-o", "--output", "output", type=OUTPUT_FILE, default=None,
              help="Write the export to FILE (atomically) instead of standard output.")
@json_option
def implement(model, sets, scheme, fuel, max_rate, toehold, leak, rate, concentration, fmt,
              output, as_json):
    """Implement MODEL's network in DNA strand displacement and print it.

    Species are grouped by role (signal, fuel, intermediate, waste); reactions
    by the formal reaction they implement, with rate constants in /M/s and /s.
    The summary line counts fuel complexes and strands per formal reaction and
    compares the fuel a decision consumes with the fuel supplied.
    """
    from crn.dna.budget import decision_fuel, inventory
    from crn.io.exports import export_network
    from crn.io.implementation import implementation_to_dict, implementation_to_text

    if as_json and output is None and fmt not in (None, "json"):
        raise click.UsageError(f"--json prints the JSON object; give -o FILE for --to {fmt}")
    params = dna_parameters(rate=rate, concentration=concentration, fuel=fuel,
                            max_rate=max_rate, toehold=toehold, leak=leak)
    formal = load(model, sets).network
    impl = build_implementation(formal, scheme, params)
    budget, inv = decision_fuel(impl), inventory(impl)
    fmt = fmt or "text"
    if fmt == "text":
        text = implementation_to_text(impl, budget, inv)
    elif fmt == "json":
        import json

        from crn.io.jsonable import to_jsonable

        text = json.dumps(to_jsonable(implementation_to_dict(impl, budget, inv)), indent=2) + "\n"
    else:
        text = export_network(impl.network, fmt)
    if output is not None:
        write_atomic(output, text)
        if not as_json:
            click.echo(f"wrote {output} ({fmt}: {impl.network.n_species} species, "
                       f"{impl.network.n_reactions} reactions)", err=True)
    if as_json:
        emit_json(implementation_to_dict(impl, budget, inv))
    elif output is None:
        click.echo(text, nl=False)
