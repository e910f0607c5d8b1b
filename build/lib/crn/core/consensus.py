"""The consensus rule of :mod:`crn.core.outcome` as numba kernels, for the engines' inner loops.

Kept apart from :mod:`crn.core.outcome` so that only code which runs an engine pays
for importing numba; ``crn.core.outcome.consensus_index`` and
``crn.core.outcome.mean_field_consensus_index`` name these same functions.
"""

from __future__ import annotations

import numba
import numpy as np

from crn.core.network import IGNORED

__all__ = ["consensus_index", "mean_field_consensus_index"]


@numba.njit(cache=True)
def consensus_index(species_label, x):
    """Index of the label every present molecule reports, or -1.

    Parameters
    ----------
    species_label : ndarray of int64, shape (n_species,)
        Label index of each species, -1 for none, ``IGNORED`` (-2) for a species
        that takes no part.
    x : ndarray, shape (n_species,)
        Counts.
    """
    found = -1
    for s in range(x.shape[0]):
        if x[s] > 0:
            label = species_label[s]
            if label == IGNORED:
                continue
            if label < 0:
                return -1
            if found < 0:
                found = label
            elif found != label:
                return -1
    return found


@numba.njit(cache=True)
def mean_field_consensus_index(species_label, n_labels, y, molecules_per_unit):
    """Mean-field consensus: the leading label when all other molecules number fewer than one.

    Parameters
    ----------
    species_label : ndarray of int64, shape (n_species,)
    n_labels : int
    y : ndarray of float64, shape (n_species,)
        Fractions (or concentrations).
    molecules_per_unit : float
        Molecules per unit of ``y``: n for fractions, the volume for concentrations.

    Returns
    -------
    int
        The label index, or -1 while the others still make at least one molecule.
    """
    if n_labels == 0:
        return -1
    totals = np.zeros(n_labels)
    for s in range(y.shape[0]):
        if species_label[s] >= 0:
            totals[species_label[s]] += max(y[s], 0.0)
    best = 0
    for k in range(1, n_labels):
        if totals[k] > totals[best]:
            best = k
    if totals[best] <= 0.0:
        return -1  # no molecule reports any label
    # Sum the others directly rather than as total minus leader: the difference
    # would turn exactly one molecule into 0.999... by cancellation.
    others = 0.0
    for s in range(y.shape[0]):
        if species_label[s] != best and species_label[s] != IGNORED:
            others += max(y[s], 0.0)
    if others * molecules_per_unit < 1.0:
        return best
    return -1
