"""The networks of the cells (n, gap) of a sweep, built from a loaded model."""

from __future__ import annotations

from collections.abc import Callable

from crn.core.model import Model
from crn.core.network import Network

__all__ = ["cell_networks"]


def cell_networks(model: Model) -> Callable[[int, int], Network]:
    """The builder of a model's network at population n and gap.

    Parameters
    ----------
    model : crn.core.model.Model
        A loaded model (with its ``--set`` overrides applied).

    Returns
    -------
    callable (n, gap) -> Network
        Picklable. When the model is a TOML text with parameters ``n`` and
        ``gap``, the text is parsed again with them set
        (:class:`~crn.analyses.probes.ModelParameters`), so every count the file
        derives from them follows, and the other overrides stay; otherwise the
        two inputs of the majority question get ``(n +- gap) / 2`` and every other
        species keeps its count (:class:`~crn.analyses.probes.InitialSplit`).

    Raises
    ------
    CRNError
        When the model asks no majority question and has no ``n`` and ``gap``.

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> cells = cell_networks(load_model("models/approximate_majority.toml"))
    >>> cells(100, 20).initial.tolist()
    [60, 40, 0]
    """
    from crn.analyses.probes import InitialSplit, ModelParameters

    if model.text and {"n", "gap"} <= set(model.parameters):
        overrides = tuple((k, v) for k, v in model.overrides if k not in ("n", "gap"))
        return ModelParameters(model.text, model.source, overrides)
    return InitialSplit(model.network)
