"""Goodness-of-fit helpers shared by the stochastic-engine tests (common practice: Pearson's
chi-square with bins merged until every expected count is at least 5)."""

import numpy as np
from scipy import stats


def chi_square_pvalue(samples, pmf, support_max):
    """p-value of Pearson's chi-square test of integer ``samples`` against ``pmf`` on
    0..support_max (the tail above is folded into the last bin)."""
    samples = np.asarray(samples)
    n = samples.size
    probs = np.array([pmf(k) for k in range(support_max + 1)], dtype=float)
    probs[-1] += max(0.0, 1.0 - probs.sum())
    observed = np.bincount(np.minimum(samples, support_max), minlength=support_max + 1)
    obs_bins, exp_bins = [], []
    acc_o = acc_e = 0.0
    for o, p in zip(observed, probs, strict=True):
        acc_o += o
        acc_e += p * n
        if acc_e >= 5:
            obs_bins.append(acc_o)
            exp_bins.append(acc_e)
            acc_o = acc_e = 0.0
    if acc_e > 0 or acc_o > 0:
        obs_bins[-1] += acc_o
        exp_bins[-1] += acc_e
    obs_bins, exp_bins = np.array(obs_bins), np.array(exp_bins)
    exp_bins *= obs_bins.sum() / exp_bins.sum()
    return stats.chisquare(obs_bins, exp_bins).pvalue


def two_sample_chi_square_pvalue(a, b, min_count=10):
    """p-value of the chi-square test that two integer samples share one distribution
    (values grouped into consecutive bins holding at least ``min_count`` pooled samples)."""
    a, b = np.asarray(a), np.asarray(b)
    top = int(max(a.max(), b.max()))
    ca = np.bincount(a, minlength=top + 1)
    cb = np.bincount(b, minlength=top + 1)
    rows_a, rows_b = [], []
    acc_a = acc_b = 0
    for x, y in zip(ca, cb, strict=True):
        acc_a += x
        acc_b += y
        if acc_a + acc_b >= min_count:
            rows_a.append(acc_a)
            rows_b.append(acc_b)
            acc_a = acc_b = 0
    if acc_a + acc_b:
        rows_a[-1] += acc_a
        rows_b[-1] += acc_b
    if len(rows_a) < 2:
        return 1.0
    return stats.chi2_contingency(np.array([rows_a, rows_b])).pvalue
