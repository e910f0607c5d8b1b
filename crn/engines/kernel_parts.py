"""Steps the direct-method kernels share (numba): consensus bookkeeping and sampling.

Used by :mod:`crn.engines.direct` and :mod:`crn.engines.reduced`. A species'
label is ``species_label[s]``: a label index, -1 for a species that reports
no label (it blocks consensus while present) or -2 for an ignored species.
``present[k]`` counts the species with molecules that report label k and
``unlabeled`` those that report none, so the consensus label is known after
each event without a scan.

Numba's on-disk cache of a kernel does not notice a change to these functions
(it keys on the kernel's own source file): after editing this module, clear
``crn/engines/__pycache__/*.nbi`` (or edit the kernels' modules) before timing
or testing.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["label_now", "label_counts", "apply_change", "record_until"]


@numba.njit(cache=True, inline="always")
def label_now(present, unlabeled, n_labels):
    """The consensus label index of the counters, or -1 when there is none."""
    if unlabeled > 0:
        return -1
    found = -1
    for k in range(n_labels):
        if present[k] > 0:
            if found >= 0:
                return -1
            found = k
    return found


@numba.njit(cache=True, inline="always")
def label_counts(x, species_label, n_labels):
    """Counters ``(present, unlabeled)`` of the species with molecules in state x."""
    present = np.zeros(max(n_labels, 1), dtype=np.int64)
    unlabeled = 0
    for s in range(x.shape[0]):
        if x[s] > 0:
            if species_label[s] == -1:
                unlabeled += 1
            elif species_label[s] >= 0:  # ignored species (-2) take no part
                present[species_label[s]] += 1
    return present, unlabeled


@numba.njit(cache=True, inline="always")
def apply_change(x, r, ch_ptr, ch_sp, ch_d, species_label, present, unlabeled):
    """Fire reaction r on x (its net change as CSR ``ch_ptr``, ``ch_sp``, ``ch_d``).

    ``present`` is updated in place for the species whose count crosses zero;
    returns the new ``unlabeled``.
    """
    for i in range(ch_ptr[r], ch_ptr[r + 1]):
        s = ch_sp[i]
        before = x[s]
        x[s] = before + ch_d[i]
        if (before > 0) != (x[s] > 0):
            step = 1 if x[s] > 0 else -1
            if species_label[s] == -1:
                unlabeled += step
            elif species_label[s] >= 0:
                present[species_label[s]] += step
    return unlabeled


@numba.njit(cache=True, inline="always")
def record_until(counts, times, k, x, t):
    """Record state x at the sample times from index k before time t; the next index.

    ``t = inf`` fills every remaining sample (the sample times are finite).
    """
    while k < times.shape[0] and times[k] < t:
        counts[k] = x
        k += 1
    return k
