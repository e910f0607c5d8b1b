"""``crn check``: states, reachability, agent conservation and dead rules of a model."""

from __future__ import annotations

import click

from crn.commands.options import emit_json, json_option, load, model_argument, set_option

__all__ = ["check"]


def _names(items) -> str:
    return ", ".join(items) if items else "none"


@click.command("check")
@model_argument
@set_option
@json_option
def check(model, sets, as_json):
    """Inspect MODEL without running it: reachable states, rules that keep the
    number of agents, rules that can never fire, labels no state can report."""
    from crn.analyses.inspection import check_model

    report = check_model(load(model, sets))
    if as_json:
        emit_json(report.to_dict())
        return
    lines = [
        f"{report.name} ({report.kind})",
        f"states       {_names(report.states)}",
        f"initial      {_names(report.initial_states)}",
        f"reachable    {_names(report.reachable)}",
        f"unreachable  {_names(report.unreachable)}",
        "rules" if report.kind == "protocol" else "reactions",
    ]
    width = max((len(r.text) for r in report.rules), default=0)
    for r in report.rules:
        where = f"line {r.line:<4}" if r.line is not None else " " * 9
        conserve = ("keeps agents" if r.conserves
                    else f"changes molecules by {r.net_change:+d}")
        fire = "can fire" if r.can_fire else "never fires"
        lines.append(f"  {where} {r.text:<{width}}  {conserve}, {fire}")
    lines.append(f"labels no reachable state reports: {_names(report.unreachable_labels)}")
    lines.extend(f"warning: {w}" for w in report.warnings)
    click.echo("\n".join(lines))
