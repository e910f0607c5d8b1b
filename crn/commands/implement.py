"""``crn implement``: the DNA strand-displacement implementation of a model's network."""

from __future__ import annotations

import click

from crn.commands.exporting import check_export_json, deliver_export, export_options
from crn.commands.options import (
    build_implementation,
    dna_options,
    dna_parameters,
    json_option,
    load,
    model_argument,
    set_option,
)

__all__ = ["implement"]


@click.command("implement")
@model_argument
@set_option
@click.option("--scheme", type=click.Choice(["ssw", "two-domain"]), default="ssw",
              show_default=True,
              help="ssw: three-domain fuel construction (Soloveichik, Seelig & Winfree 2010); "
                   "two-domain: join-fork gates (Cardelli 2013).")
@dna_options
@export_options("default text: grouped by role, rates in lab units")
@json_option
def implement(model, sets, scheme, fuel, max_rate, toehold, leak, rate, concentration, fmt,
              output, as_json):
    """Implement MODEL's network in DNA strand displacement and print it.

    Species are grouped by role (signal, fuel, intermediate, waste); reactions
    by the formal reaction they implement, with rate constants in /M/s and /s.
    The summary line counts fuel complexes and strands per formal reaction and
    compares the fuel a decision consumes with the fuel supplied.

    Decision labels (the same in every export and in every analysis run with
    --implement): a signal reports its formal label; an intermediate holding
    signal strands counts as those signals, a committed output waiting for its
    fuel as its formal reaction's products; fuel, waste and released strands are
    ignored; mixed or unlabelled contents block consensus. The text marks each
    intermediate [counts as L] or [no label]; the JSON has "decision_labels".
    """
    from crn.dna.budget import decision_fuel, inventory
    from crn.io.exports import export_network
    from crn.io.implementation import implementation_to_dict, implementation_to_text

    check_export_json(as_json, output, fmt)
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
    deliver_export(text, impl.network, fmt=fmt, output=output, as_json=as_json,
                   json_obj=implementation_to_dict(impl, budget, inv) if as_json else None)
