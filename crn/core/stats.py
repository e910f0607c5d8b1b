"""Small statistics shared by reports: binomial intervals and quantile summaries."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from numpy.typing import ArrayLike

__all__ = ["wilson_interval", "time_summary"]

# scipy.special.ndtri(0.5 + c / 2) for the usual confidences c, to the last bit (checked
# in tests/test_stats.py), so that reporting an ensemble needs no scipy import
_NORMAL_QUANTILES = {0.9: 1.6448536269514722, 0.95: 1.959963984540054,
                     0.99: 2.5758293035489004}


def wilson_interval(successes: int, trials: int,
                    confidence: float = 0.95) -> tuple[float, float, float]:
    """Wilson score interval for a binomial proportion.

    Parameters
    ----------
    successes, trials : int
    confidence : float, default 0.95

    Returns
    -------
    (p, low, high) : tuple of float
        The point estimate and the interval; ``(nan, 0, 1)`` for zero trials.

    References
    ----------
    Wilson, "Probable inference, the law of succession, and statistical
    inference", J. Amer. Statist. Assoc. 22:209-212, 1927.
    """
    if trials < 0 or not 0 <= successes <= trials:
        raise ValueError(f"need 0 <= successes <= trials, got {successes} of {trials}")
    if trials == 0:
        return float("nan"), 0.0, 1.0
    z = _NORMAL_QUANTILES.get(confidence)
    if z is None:
        from scipy.special import ndtri  # what scipy.stats.norm.ppf computes

        z = float(ndtri(0.5 + confidence / 2))
    p = successes / trials
    denom = 1 + z * z / trials
    centre = (p + z * z / (2 * trials)) / denom
    half = z * np.sqrt(p * (1 - p) / trials + z * z / (4 * trials * trials)) / denom
    low = 0.0 if successes == 0 else max(0.0, centre - half)
    high = 1.0 if successes == trials else min(1.0, centre + half)
    return float(p), float(low), float(high)


def time_summary(times: ArrayLike) -> dict | None:
    """``{mean, median, q05, q95}`` of the finite entries of ``times``, None if there are none.

    Parameters
    ----------
    times : array_like of float, shape (n_runs,)
        Times; NaN and infinite entries (runs without consensus) are ignored.

    Returns
    -------
    dict of str to float, or None
        Keys ``mean``, ``median``, ``q05`` and ``q95`` (the 5 % and 95 % quantiles).
    """
    t = np.asarray(times, dtype=float)
    t = t[np.isfinite(t)]
    if t.size == 0:
        return None
    q05, median, q95 = np.quantile(t, [0.05, 0.5, 0.95])
    return {"mean": float(t.mean()), "median": float(median), "q05": float(q05),
            "q95": float(q95)}
