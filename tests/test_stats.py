"""Binomial intervals and time summaries shared by every report."""

import numpy as np
import pytest

from crn.core.stats import time_summary, wilson_interval


@pytest.mark.parametrize(
    ("successes", "trials", "low", "high"),
    [
        # from memory: Newcombe, "Two-sided confidence intervals for the single
        # proportion", Statistics in Medicine 17:857-872, 1998, Table I (Wilson, 95%)
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ],
)
def test_wilson_interval_matches_published_values(successes, trials, low, high):
    p, lo, hi = wilson_interval(successes, trials)
    assert p == successes / trials
    assert lo == pytest.approx(low, abs=5e-5)
    assert hi == pytest.approx(high, abs=5e-5)


def test_wilson_interval_edges_are_exact():
    assert wilson_interval(0, 400)[1] == 0.0
    assert wilson_interval(400, 400)[2] == 1.0
    p, low, high = wilson_interval(0, 0)
    assert np.isnan(p) and (low, high) == (0.0, 1.0)
    with pytest.raises(ValueError, match="successes"):
        wilson_interval(5, 3)


def test_wilson_interval_widens_with_confidence():
    _, low95, high95 = wilson_interval(30, 100, 0.95)
    _, low999, high999 = wilson_interval(30, 100, 0.999)
    assert low999 < low95 < 0.3 < high95 < high999


def test_time_summary_ignores_runs_without_consensus():
    times = [1.0, 2.0, 3.0, np.nan, 4.0]
    summary = time_summary(times)
    # common practice: numpy's default (linear) quantiles of 1, 2, 3, 4
    assert summary == pytest.approx({"mean": 2.5, "median": 2.5, "q05": 1.15, "q95": 3.85},
                                    rel=1e-12)
    assert time_summary([np.nan]) is None


def test_stored_normal_quantiles_are_scipys_to_the_last_bit():
    from scipy.special import ndtri
    from scipy.stats import norm

    from crn.core.stats import _NORMAL_QUANTILES

    for confidence, z in _NORMAL_QUANTILES.items():
        assert z == float(ndtri(0.5 + confidence / 2)) == float(norm.ppf(0.5 + confidence / 2))
