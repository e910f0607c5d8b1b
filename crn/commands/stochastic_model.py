"""``--full-network`` and the line saying which model ran an implementation's stochastic runs.

Shared by ``regimes --implement`` and ``copies --implement``: by default their
stochastic runs use the implementation's reduced model where it is valid
(:mod:`crn.dna.reduced`); ``--full-network`` runs the whole implementation.
"""

from __future__ import annotations

import click

__all__ = ["full_network_option", "stochastic_model_text"]


def full_network_option(func):
    """Add ``--full-network`` (passed as ``full_network``)."""
    return click.option(
        "--full-network", "full_network", is_flag=True,
        help="With --implement: run the stochastic runs on the full implementation network "
             "instead of its reduced model (fast reversible binding at quasi-steady state, "
             "used by default where the fuel excess makes it valid); much slower.")(func)


def stochastic_model_text(models: dict) -> str:
    """One line from :meth:`crn.analyses.implemented.ImplementedCells.stochastic_models`."""
    reduced, full = models["reduced"], models["full"]
    if not reduced and not full:
        return "(no stochastic runs)"
    if not full:
        return ("(stochastic runs on the reduced model: fast reversible binding at "
                "quasi-steady state, Rao & Arkin 2003; --full-network for the whole network)")
    reasons = sorted({f["reason"] for f in full})
    where = "all stochastic runs" if not reduced else \
        f"{len(full)} of {len(full) + len(reduced)} stochastic populations/cells"
    return f"({where} on the full implementation network: {'; '.join(reasons)})"
