"""``crn translate``: a model's reaction network as text, JSON, SBML or LaTeX."""

from __future__ import annotations

import click

from crn.commands.exporting import FORMATS, check_export_json, deliver_export, export_options
from crn.commands.options import json_option, load, model_argument, set_option
from crn.core.errors import CRNError

__all__ = ["translate", "FORMATS"]


@click.command("translate")
@model_argument
@set_option
@export_options("default text")
@json_option
def translate(model, sets, fmt, output, as_json):
    """Translate MODEL (a protocol or a network) into its reaction network.

    A protocol becomes the bimolecular network whose stochastic kinetics at
    volume n - 1 is exactly the protocol, with network time = parallel time.
    """
    check_export_json(as_json, output, fmt)
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
    deliver_export(text, net, fmt=fmt, output=output, as_json=as_json,
                   json_obj=network_to_dict(net) if as_json else None)
