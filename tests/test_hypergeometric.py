"""The hypergeometric samplers of the batched engine, against exact laws."""

import math

import mpmath
import numpy as np
import pytest
from scipy import stats
from seeds import seed

from crn.engines.hypergeometric import (
    INVERSION_MODE,
    hypergeometric,
    log_factorial_ratio,
    multivariate_hypergeometric,
)

ALPHA = 0.001  # significance of every goodness-of-fit test below
DRAWS = 40_000


def _chi_square_pvalue(samples, pmf_values, support):
    """Pearson chi-square of samples against a pmf, pooling cells expected below 5."""
    expected = pmf_values * samples.size
    observed = np.array([(samples == k).sum() for k in support], dtype=float)
    keep = expected >= 5
    obs = np.append(observed[keep], samples.size - observed[keep].sum())
    exp = np.append(expected[keep], samples.size - expected[keep].sum())
    if exp[-1] < 5:  # fold a tiny remainder into the largest cell
        obs[np.argmax(exp[:-1])] += obs[-1]
        exp[np.argmax(exp[:-1])] += exp[-1]
        obs, exp = obs[:-1], exp[:-1]
    return stats.chisquare(obs, exp).pvalue


@pytest.mark.parametrize(
    ("ngood", "nbad", "nsample"),
    [
        (5, 7, 4),  # tiny: inversion
        (3, 997, 500),  # small mode, large population: inversion, sample > half
        (30, 40, 25),  # mode 11 < 16: inversion
        (100, 300, 150),  # ratio of uniforms
        (4000, 1000, 3000),  # ratio of uniforms, more good than bad, sample > half
        (10**6, 3 * 10**6, 1000),  # ratio of uniforms, sample << population
    ],
)
def test_univariate_matches_the_exact_pmf(ngood, nbad, nsample):
    # exact pmf: scipy.stats.hypergeom (common practice), chi-square at ALPHA
    x = hypergeometric(ngood, nbad, nsample, size=DRAWS, rng=seed(ngood + nbad))
    support = np.arange(max(0, nsample - nbad), min(nsample, ngood) + 1)
    pmf = stats.hypergeom(ngood + nbad, ngood, nsample).pmf(support)
    assert x.min() >= support[0] and x.max() <= support[-1]
    assert _chi_square_pvalue(x, pmf, support) > ALPHA


def test_both_methods_are_exercised_by_the_parameters_above():
    # derived: mode = floor((s + 1)(g + 1) / (N + 2)) after the symmetry reductions
    assert (30 + 1) * (25 + 1) / 72 < INVERSION_MODE
    assert (100 + 1) * (150 + 1) / 402 > INVERSION_MODE


@pytest.mark.parametrize("total", [2**40, 2**60])
def test_mean_and_variance_at_huge_populations(total):
    # derived: E = s K / N, Var = s (K/N) (1 - K/N) (N - s) / (N - 1); tolerance 5 standard
    # errors of the sample mean and of the sample variance (Var * sqrt(2 / (R - 1)) for a
    # near-normal law; the excess kurtosis here is below 1e-6)
    good, draws = total // 3, total // 5
    x = hypergeometric(good, total - good, draws, size=DRAWS, rng=seed(7)).astype(np.float64)
    p = good / total
    mean = draws * p
    var = draws * p * (1 - p) * (total - draws) / (total - 1)
    assert abs(x.mean() - mean) < 5 * math.sqrt(var / DRAWS)
    assert abs(x.var(ddof=1) - var) < 5 * var * math.sqrt(2 / (DRAWS - 1))


def test_huge_population_with_a_small_mode_uses_the_exact_tail():
    # derived: 12 good among 2**60 items, half of them drawn: Binomial-like with mean 6
    x = hypergeometric(12, 2**60 - 12, 2**59, size=DRAWS, rng=seed(3))
    support = np.arange(13)
    pmf = stats.binom(12, 0.5).pmf(support)  # exact in the limit; error ~ 12 / 2**59
    assert _chi_square_pvalue(x, pmf, support) > ALPHA


def test_multivariate_marginals_and_sums():
    # derived: each colour's count is hypergeometric(draws, colour, total)
    colors = np.array([20, 5, 35, 40])
    x = multivariate_hypergeometric(colors, 30, size=DRAWS, rng=seed(11))
    assert (x.sum(axis=1) == 30).all() and (x <= colors).all()
    for i, ci in enumerate(colors):
        support = np.arange(0, min(30, ci) + 1)
        pmf = stats.hypergeom(colors.sum(), ci, 30).pmf(support)
        assert _chi_square_pvalue(x[:, i], pmf, support) > ALPHA / len(colors)


def test_multivariate_joint_law_on_a_small_urn():
    # exact joint pmf: scipy.stats.multivariate_hypergeom (common practice)
    colors = [3, 4, 5]
    x = multivariate_hypergeometric(colors, 6, size=DRAWS, rng=seed(12))
    cells = [(a, b, 6 - a - b) for a in range(4) for b in range(5) if 0 <= 6 - a - b <= 5]
    pmf = np.array([stats.multivariate_hypergeom(colors, 6).pmf(c) for c in cells])
    codes = x[:, 0] * 100 + x[:, 1] * 10 + x[:, 2]
    support = np.array([a * 100 + b * 10 + c for a, b, c in cells])
    assert _chi_square_pvalue(codes, pmf, support) > ALPHA


def test_multivariate_at_two_to_the_sixty():
    colors = [2**59, 2**58, 2**58 - 7, 7]
    x = multivariate_hypergeometric(colors, 2**50, size=2000, rng=seed(13))
    assert (x.sum(axis=1) == 2**50).all()
    x = x.astype(float)
    # derived: mean of colour i is draws * c_i / N, sd below sqrt(draws * c_i / N)
    for i in range(4):
        mean = 2**50 * colors[i] / sum(colors)
        assert abs(x[:, i].mean() - mean) < 5 * math.sqrt(mean / 2000)


def test_log_factorial_ratio_is_accurate_at_huge_arguments():
    # reference: mpmath at 60 digits (common practice)
    mpmath.mp.dps = 60
    for top, bottom in [(10, 3), (10**6, 10**6 - 5), (2**60, 2**60 - 2**31), (2**59 + 5, 2**40)]:
        exact = mpmath.loggamma(top + 1) - mpmath.loggamma(bottom + 1)
        assert log_factorial_ratio(top, bottom) == pytest.approx(float(exact), rel=1e-13)


def test_same_seed_same_draws_and_bad_input():
    assert (hypergeometric(10**12, 10**12, 10**6, size=5, rng=1)
            == hypergeometric(10**12, 10**12, 10**6, size=5, rng=1)).all()
    with pytest.raises(ValueError, match="2\\*\\*60"):
        hypergeometric(2**60, 1, 5)
    with pytest.raises(ValueError, match="exceeds"):
        hypergeometric(3, 4, 8)
    with pytest.raises(ValueError, match="non-negative"):
        multivariate_hypergeometric([3, -1], 1)
    with pytest.raises(TypeError, match="integer"):
        hypergeometric(2.5, 4, 1)
