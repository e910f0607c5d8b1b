"""Poisson loading of droplets (crn.core.loading, copies --loading poisson)."""

import json

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.stats import poisson, skellam

from crn.analyses.copies import Prober, smallest_n
from crn.analyses.probes import InitialSplit
from crn.cli import cli
from crn.core.loading import (
    draw_droplets,
    droplet_network,
    loading_grid,
    poisson_means,
    reversal_probability,
    split_decisions,
)
from crn.core.stats import wilson_interval
from crn.io.models import load_model
from crn.solvers.exact import exact_outcomes, transient_outcomes

DROPLET = "models/droplet_assay.toml"


@pytest.fixture(scope="module")
def nets():
    return InitialSplit(load_model(DROPLET).network)


@pytest.mark.parametrize("n, gap", [(40, 4), (300, 15), (3000, 150)])
def test_reversal_matches_the_skellam_distribution(n, gap):
    # reference: the difference of two independent Poisson counts is Skellam-distributed
    # (Skellam, J. R. Stat. Soc. 109(3):296, 1946; scipy.stats.skellam)
    lam_a, lam_b = poisson_means(n, gap)
    grid = loading_grid(n, gap, tail=1e-9)
    reversed_, tied = grid.reversal()
    assert reversed_ == pytest.approx(skellam.cdf(-1, lam_a, lam_b), abs=1e-8)
    assert tied == pytest.approx(skellam.pmf(0, lam_a, lam_b), abs=1e-8)
    assert 1 - 1e-9 <= grid.covered <= 1
    # the one-dimensional sum used for large droplets
    assert reversal_probability(n, gap) == pytest.approx(skellam.cdf(0, lam_a, lam_b), abs=1e-10)


def test_droplet_draws_follow_the_poisson_means():
    # derived: each count is Poisson, so its sample mean over 20,000 droplets lies within
    # 4 standard errors sqrt(lambda / 20000) of lambda (two-sided 99.99%)
    major, minor = draw_droplets(300, 30, 20_000, np.random.default_rng(5))
    for counts, lam in ((major, 165.0), (minor, 135.0)):
        assert abs(counts.mean() - lam) < 4 * np.sqrt(lam / 20_000)
    # and the reversed share against Skellam, within the Wilson 99.9% interval
    k = int((minor >= major).sum())
    _, low, high = wilson_interval(k, 20_000, confidence=0.999)
    assert low <= skellam.cdf(0, 165.0, 135.0) <= high


def test_droplet_network_swaps_inputs_when_the_minority_wins(nets):
    net = droplet_network(nets, 3, 7)
    r, s = net.inputs
    assert (net.initial[r], net.initial[s]) == (3, 7)
    net = droplet_network(nets, 7, 3)
    assert (net.initial[r], net.initial[s]) == (7, 3)


def test_split_decisions_match_the_exact_engine_per_split(nets):
    # reference: crn.solvers.exact solved once per starting split (absorption, transient)
    total, majors = 31, [9, 15, 16, 22, 31]
    eventual = split_decisions(nets, total, majors, "R")
    by_deadline = split_decisions(nets, total, majors, "R", deadline=6.0)
    for a, p, q in zip(majors, eventual, by_deadline, strict=True):
        net = droplet_network(nets, a, total - a)
        assert p == pytest.approx(exact_outcomes(net, absorb="first").probabilities["R"],
                                  abs=1e-10)
        assert q == pytest.approx(transient_outcomes(net, 6.0)["R"], abs=1e-8)


def _direct_sum(nets, n, gap):
    """P(correct) summed over every loading pair with the exact engine (one solve per pair)."""
    lam_a, lam_b = poisson_means(n, gap)
    total = 0.0
    for a in range(0, int(poisson.isf(1e-10, lam_a)) + 1):
        for b in range(0, int(poisson.isf(1e-10, lam_b)) + 1):
            if a + b == 0:
                continue
            p = exact_outcomes(droplet_network(nets, a, b), absorb="first").probabilities["R"]
            total += poisson.pmf(a, lam_a) * poisson.pmf(b, lam_b) * p
    return total


def test_exact_poisson_probe_integrates_over_the_loading(nets):
    # reference: the same sum with one exact solve per (major, minor) pair
    prober = Prober(nets, method="exact", loading="poisson")
    probe = prober.probe(4, 2, None, 0.9)
    assert probe.method == "exact" and probe.loading == "poisson"
    assert probe.p == pytest.approx(_direct_sum(nets, 4, 2), abs=1e-6)
    # the split of the risk adds up, and the loading part is at most the reversal probability
    assert probe.wrong_loading + probe.wrong_kinetics == pytest.approx(1 - probe.p, abs=1e-6)
    assert probe.wrong_loading <= probe.reversal + 1e-12
    assert probe.reversal == pytest.approx(skellam.cdf(0, 3.0, 1.0), abs=1e-6)


def test_sampled_poisson_probe_agrees_with_the_exact_one(nets):
    # the sampling path (one droplet per run) against the exact integration at the same mean:
    # the exact value lies in the sampled probe's 95% interval (simultaneous over its looks)
    n, gap = 20, 4
    exact = Prober(nets, method="exact", loading="poisson").probe(n, gap, None, 0.9)
    # aiming at the exact value itself, the runs go on until runs_max (or an early, rare stop)
    sampled = Prober(nets, method="stochastic", loading="poisson", runs_max=4000,
                     rng=8).probe(n, gap, None, exact.p)
    assert sampled.trials >= 800
    assert sampled.low <= exact.p <= sampled.high
    assert sampled.reversal == pytest.approx(exact.reversal, abs=1e-6)
    # the post-stratified parts against the exact ones: each within 4 standard errors of a
    # proportion over the runs (derived: binomial variance p (1 - p) / runs, 99.99% two-sided)
    for part in ("wrong_loading", "wrong_kinetics"):
        p = getattr(exact, part)
        assert abs(getattr(sampled, part) - p) < 4 * np.sqrt(p * (1 - p) / sampled.trials) + 1e-9


def test_poisson_loading_needs_more_copies_than_a_fixed_split(nets):
    # droplets that receive a reversed gap add risk: the safe answer grows (both exact)
    fixed = smallest_n(nets, gap_fraction=0.5, risk=0.1, method="exact", rng=1)
    loaded = smallest_n(nets, gap_fraction=0.5, risk=0.1, method="exact", rng=1,
                        loading="poisson")
    assert loaded.estimate > fixed.estimate
    at = loaded.at_estimate
    assert at.p_wrong[0] < 0.1 and loaded.at_below.p_wrong[0] >= 0.1


def test_cli_poisson_loading_reports_the_split_of_the_risk():
    runner = CliRunner()
    result = runner.invoke(cli, ["copies", DROPLET, "--gap-fraction", "0.5", "--risk", "0.1",
                                 "--loading", "poisson", "--method", "exact", "--seed", "2",
                                 "--volume", "10fL", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    parts = data["risk_parts"]
    assert data["loading"] == "poisson"
    assert parts["loading"] + parts["kinetics"] == pytest.approx(data["p_wrong"]["estimate"],
                                                                 abs=1e-6)
    n, gap = data["n"]["estimate"], data["gap"]
    assert parts["reversal"] == pytest.approx(skellam.cdf(0, (n + gap) / 2, (n - gap) / 2),
                                              abs=1e-6)
    assert "caution" in data
