"""``crn verify``: check that a protocol stably computes the majority for every small n."""

from __future__ import annotations

import click

from crn.commands.options import (
    RenamedOption,
    counting,
    emit_json,
    guard,
    guard_options,
    json_option,
    load,
    model_argument,
    progress_bar,
    set_option,
    stop_interrupted,
)

__all__ = ["verify", "EXIT_COUNTEREXAMPLE"]

#: Exit status of ``crn verify`` when the protocol is refuted.
EXIT_COUNTEREXAMPLE = 1


def _counts(counts: dict) -> str:
    return ", ".join(f"{s}={c}" for s, c in counts.items())


def _step(step: dict) -> str:
    if "pair" in step:
        return f"{step['pair'][0]}, {step['pair'][1]} -> {step['outcome'][0]}, {step['outcome'][1]}"
    return step["reaction"]


@click.command("verify")
@model_argument
@set_option
@click.option("--n-max", "n_max", cls=RenamedOption, old=("--max-n",),
              type=click.IntRange(min=2), required=True, metavar="N",
              help="Check every population size from 2 to N (was --max-n).")
@click.option("--max-states", type=click.IntRange(min=1), default=None, metavar="N",
              help="Refuse a case with more reachable configurations than N.")
@guard_options
@json_option
def verify(model, sets, n_max, max_states, max_memory, force, as_json):
    """Check that MODEL stably computes its majority question for every n from 2 to
    --n-max and every split of the n agents between the two input states.

    Every bottom strongly connected component of the reachable configurations
    must be in consensus on the correct label; the first failure is shown as
    the shortest sequence of interactions leading into a wrong component.
    Non-input states keep the model's initial counts (usually zero).

    Exit status: 0 when every case is correct, 1 on a counterexample (so scripts
    can rely on it), 2 on bad input.
    """
    from crn.analyses.verify import verify as verify_model
    from crn.runtime.guards import verify_estimate
    from crn.runtime.interrupts import call_interruptibly

    loaded = load(model, sets)
    if loaded.network.inputs is not None:
        guard(verify_estimate(loaded.network, n_max), max_memory, force, announce=not as_json)
    checked = [0]
    try:
        with progress_bar("population sizes", n_max - 1, enabled=not as_json) as bar:
            result = call_interruptibly(verify_model, loaded, n_max,
                                        progress=counting(bar, checked),
                                        max_states=max_states)
    except KeyboardInterrupt:
        stop_interrupted(f"after n = 2..{checked[0] + 1} of 2..{n_max} (no counterexample "
                         "among them)" if checked[0] else "before n = 2 was checked")
    if as_json:
        # max_n: the key's earlier name, kept beside n_max for one release (deprecated)
        emit_json({"checked": result.checked, "correct": result.correct,
                   "counterexample": result.counterexample, "ties": result.ties,
                   "n_max": result.max_n, "max_n": result.max_n})
        _exit_status(result)
        return
    name = loaded.network.name
    lines = []
    if result.correct:
        lines.append(f"{name}: correct for every n from 2 to {n_max} and every input split "
                     f"({result.checked} cases checked, up to {result.largest:,} configurations)")
    else:
        cx = result.counterexample
        lines.append(f"{name}: NOT correct ({result.checked} cases checked)")
        lines.append(f"counterexample at n = {cx['n']}: {_counts(cx['initial'])} "
                     f"(correct answer {cx['expected']})")
        for i, step in enumerate(cx["path"], start=1):
            lines.append(f"  {i:>3}. {_step(step)}")
        what = ("reports no single label" if cx["label"] == "none"
                else f"stably outputs {cx['label']}")
        lines.append(f"ends in {_counts(cx['final'])}, in a bottom component that {what}")
    if result.ties:
        outputs = sorted({o for tie in result.ties for o in tie["outcomes"]})
        lines.append(f"{len(result.ties)} tie split(s) not judged (the model has no 'tie' "
                     f"label); their bottom components output: {', '.join(outputs)}")
    click.echo("\n".join(lines))
    _exit_status(result)


def _exit_status(result) -> None:
    if not result.correct:
        click.get_current_context().exit(EXIT_COUNTEREXAMPLE)
