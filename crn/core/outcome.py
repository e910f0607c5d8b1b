"""Who won and when: the one definition of consensus every engine uses.

A configuration is in consensus on label L when every molecule present reports
L (a molecule that reports nothing breaks consensus). The mean field reaches
consensus when the molecules not reporting the leading label add up to fewer
than one. Species marked :data:`~crn.core.network.IGNORED` (fuel, gates,
intermediates and waste of a DNA implementation) take no part: they neither
report a label nor break consensus. A formal species held inside an
intermediate therefore counts toward no label until it is released again.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from crn.core.network import NO_CONSENSUS, Network

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

__all__ = [
    "NO_CONSENSUS",
    "TIE",
    "RunOutcome",
    "correct_label",
    "label_name",
    "tally",
]

TIE = "tie"

_KERNELS = ("consensus_index", "mean_field_consensus_index")


def __getattr__(name):
    # The numba kernels live in crn.core.consensus: importing them here on first use keeps
    # numba out of every import that only needs labels and outcomes.
    if name in _KERNELS:
        from crn.core import consensus

        return getattr(consensus, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


@dataclass(frozen=True)
class RunOutcome:
    """The decision of one run (or of the mean field).

    Attributes
    ----------
    label : str or None
        Label at the first consensus, None if none was reached by the horizon.
    time : float or None
        Time of the first consensus.
    final_label : str or None
        Consensus label at the horizon, or when the network fell silent.
    held : bool
        Whether ``label`` was still the consensus at the end.
    """

    label: str | None
    time: float | None
    final_label: str | None
    held: bool

    @classmethod
    def from_indices(cls, net: Network, first: int, time: float, last: int) -> RunOutcome:
        """Build from label indices (-1 for none) and the first consensus time (NaN for none)."""
        label = label_name(net, first)
        final = label_name(net, last)
        return cls(
            label=label,
            time=None if label is None or not np.isfinite(time) else float(time),
            final_label=final,
            held=label is not None and final == label,
        )


def label_name(net: Network, index: int) -> str | None:
    """Label name for an index, None for -1.

    Parameters
    ----------
    net : Network
    index : int
        Index into ``net.labels``; any negative value means no label.

    Returns
    -------
    str or None
    """
    return None if index < 0 else net.labels[index]


def correct_label(net: Network, initial: ArrayLike | None = None) -> str | None:
    """The right answer of the majority question for an initial state.

    The label the more numerous input state reports (its name if it reports
    none), ``"tie"`` for equal counts, None when the network asks no question.

    Parameters
    ----------
    net : Network
    initial : array_like of int, shape (n_species,), optional
        Initial counts; by default ``net.initial``.

    Returns
    -------
    str or None
    """
    if net.inputs is None:
        return None
    x = net.initial if initial is None else np.asarray(initial)
    a, b = net.inputs
    if x[a] == x[b]:
        return TIE
    winner = a if x[a] > x[b] else b
    k = int(net.species_label[winner])
    return net.labels[k] if k >= 0 else net.species[winner]


def tally(labels: Iterable[str | None]) -> dict[str, int]:
    """Count labels, writing ``"none"`` for runs without consensus.

    Parameters
    ----------
    labels : iterable of str or None
        One label per run, None for a run without consensus.

    Returns
    -------
    dict of str to int
        Label -> number of runs, in order of first appearance.
    """
    counts = Counter(NO_CONSENSUS if label is None else label for label in labels)
    return dict(counts)
