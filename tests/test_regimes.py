"""Regime maps: where the mean field's decision can be trusted (crn.analyses.regimes)."""

import math

import numpy as np
import pytest
from seeds import seed

from crn.analyses.probes import (
    InitialSplit,
    gap_for_fraction,
    late_consensus_bound,
    look_levels,
    look_schedule,
    sample_until_decided,
    sided_interval,
    simultaneous_interval,
)
from crn.analyses.regimes import (
    evaluate_cell,
    fit_boundary,
    plan_cells,
    regime_map,
    risk_flag,
    time_flag,
)
from crn.io.models import load_model

AM = "models/approximate_majority.toml"
VOTER = "models/voter.toml"
EM = "models/exact_majority.toml"
NS = [40, 80, 160, 320]
FRACTIONS = [0.08, 0.12, 0.18, 0.27, 0.4]


@pytest.fixture(scope="module")
def am_map():
    net = load_model(AM).network
    return regime_map(InitialSplit(net), NS, gap_fractions=FRACTIONS, method="exact", rng=1)


def test_gap_rounding_keeps_parity():
    # derived: (n + gap) / 2 must be whole, so gap has n's parity; a tie is raised to the
    # smallest positive gap. 0.05 * 100 = 5 is odd, equally far from 4 and 6; the nearer-gap
    # rule keeps 4 only when strictly nearer (5 - 4 < 6 - 5 is false), so the tie goes up to 6
    assert gap_for_fraction(100, 0.05) == 6
    assert gap_for_fraction(101, 0.05) == 5
    assert gap_for_fraction(1000, 0.001) == 2
    assert gap_for_fraction(999, 0.0001) == 1
    cells, skipped = plan_cells([100, 101], gaps=[2, 3])
    assert cells == [(100, 2), (101, 3)]
    assert skipped == [(100, 3), (101, 2)]


def test_flags_follow_design_rule():
    # docs/design.md: misleading when the lower bound exceeds the risk, ok when the upper is below
    assert risk_flag(0.02, 0.3, 0.01) == "misleading"
    assert risk_flag(0.0, 0.009, 0.01) == "ok"
    assert risk_flag(0.005, 0.02, 0.01) == "uncertain"


def test_misleading_region_shrinks_with_n(am_map):
    # Angluin, Aspnes, Eisenstat 2008: approximate majority is correct with high probability
    # once the margin is omega(sqrt(n) log n); at a fixed relative gap the margin grows like n,
    # so its error falls as n grows and fewer relative gaps mislead
    misleading = {n: sum(c.flag == "misleading" for c in am_map.cells if c.n == n) for n in NS}
    counts = [misleading[n] for n in NS]
    assert all(a >= b for a, b in zip(counts, counts[1:], strict=False)), counts
    assert counts[-1] < counts[0], counts
    for f in FRACTIONS:
        p = [next(c.p_wrong for c in am_map.cells if c.n == n and c.gap ==
                  gap_for_fraction(n, f)) for n in NS]
        assert all(a > b for a, b in zip(p, p[1:], strict=False)), (f, p)


def _am_minority_wins(n):
    """P(the run ends in all-Y) from every (x, y), b = n - x - y, of approximate majority.

    derived: the translated network fires X + Y -> X + B and X + Y -> Y + B at x y each,
    X + B -> 2 X at x b and Y + B -> 2 Y at y b (ordered pairs, one rate constant); the
    absorption probability h solves h(s) = sum_s' rate(s, s') h(s') / total(s) with
    h = 1 on x = 0 < y and h = 0 on y = 0 < x. Written here from the rules, apart from
    crn.solvers.exact.
    """
    import scipy.sparse as sp
    from scipy.sparse.linalg import spsolve

    interior = [(x, y) for x in range(1, n + 1) for y in range(1, n + 1 - x)]
    index = {s: i for i, s in enumerate(interior)}
    rows, cols, vals, rhs = [], [], [], np.zeros(len(interior))
    for i, (x, y) in enumerate(interior):
        b = n - x - y
        moves = [((x, y - 1), x * y), ((x - 1, y), x * y), ((x + 1, y), x * b),
                 ((x, y + 1), y * b)]
        rows.append(i)
        cols.append(i)
        vals.append(float(sum(rate for _, rate in moves)))
        for (u, v), rate in moves:
            if rate == 0:
                continue
            if (u, v) in index:
                rows.append(i)
                cols.append(index[(u, v)])
                vals.append(-float(rate))
            elif u == 0:
                rhs[i] += rate  # all-Y reached
    h = spsolve(sp.csr_matrix((vals, (rows, cols)), shape=(len(rhs),) * 2), rhs)
    return lambda x, y: float(h[index[(x, y)]])


def test_boundary_exponent_matches_an_independent_exact_computation(am_map):
    # The exponent of the exact map against one recomputed here from absorption
    # probabilities solved independently (_am_minority_wins), crossings interpolated the
    # same way (linear in log gap, log p; the uppermost crossing). Both are exact, so they
    # agree to solver precision (1e-6 allowed). Angluin, Aspnes, Eisenstat, Distributed
    # Computing 21(2), 2008: at a fixed risk the critical gap grows like sqrt(n) up to log
    # factors, so on this grid the slope lies near 1/2 (0.517 here; 0.05 allowed for the log
    # factors over n = 40..320).
    b = am_map.boundary
    assert len(b.critical_gaps) == len(NS)
    x, y = [], []
    for n in NS:
        wins = _am_minority_wins(n)
        rows = sorted((c.gap, wins((n + c.gap) // 2, (n - c.gap) // 2))
                      for c in am_map.cells if c.n == n)
        for (g1, p1), (g2, p2) in zip(rows[-2::-1], rows[::-1], strict=False):
            if p1 > am_map.risk >= p2:
                t = math.log(p1 / am_map.risk) / math.log(p1 / p2)
                x.append(math.log(n))
                y.append(math.log(g1) + t * math.log(g2 / g1))
                break
    independent = np.polyfit(x, y, 1)[0]
    assert b.exponent == pytest.approx(independent, abs=1e-6)
    assert independent == pytest.approx(0.5, abs=0.05)
    assert [g for _, g in b.critical_gaps] == pytest.approx(np.exp(y), rel=1e-6)
    # exact cells carry no sampling error, so there is no confidence interval; the grid's
    # resolution is reported apart, and contains the estimate
    assert b.low is None and b.high is None
    assert b.grid_low < independent < b.grid_high
    # every critical gap lies inside the grid bracket where the exact probability crosses the risk
    for n, g in b.critical_gaps:
        rows = sorted((c.gap, c.p_wrong) for c in am_map.cells if c.n == n)
        below = max(gap for gap, p in rows if p > am_map.risk)
        above = min(gap for gap, p in rows if gap > below)
        assert below <= g <= above


def _synthetic_cells(rng, exponent, runs=1000, risk=0.01):
    """Sampled cells of a boundary ``gap_c = 3 n**exponent`` with a known exponent.

    p(n, gap) = risk * (gap / gap_c(n))**-3, so log p is linear in log gap and the
    interpolated crossing of the true probabilities is gap_c exactly: the only error of
    the fitted exponent is the sampling error of the runs, which the interval must cover.
    """
    from crn.analyses.regimes import RegimeCell

    cells = []
    for n in (100, 1000, 10_000, 100_000):
        for ratio in np.geomspace(0.5, 2.0, 7):
            gap = 3 * n**exponent * ratio
            p = min(0.5, risk * ratio**-3)
            k = int(rng.binomial(runs, p))
            cells.append(RegimeCell(n, float(gap), "X", 1.0, k / runs, 0.0, 1.0, k, runs,
                                    "uncertain", "ok", 1.0, "stochastic", 10.0))
    return cells


def test_exponent_interval_covers_a_known_exponent_at_its_level():
    # The interval is checked, not the estimate against its own interval: on 400 synthetic
    # maps with a known exponent (_synthetic_cells) the 95% bootstrap interval must cover it
    # at least as often as a 95% interval would, one-sided at level 0.001 (exact binomial
    # quantile of 400 trials), and must miss at least once: a hull that always covers
    # fails, while an interval covering 98% misses none of 400 with probability
    # 0.98**400 = 3e-4. Its mean half-width must be 1.96 times the spread of the estimates
    # over the maps: the percentile bootstrap is somewhat conservative with ~10 disagreeing
    # runs per cell near the crossing (measured: ratio about 1.1, coverage about 98%); the
    # spread is known to 3.5% from 400 maps (sd / sqrt(2 * 399)), so 0.8 .. 1.3 allows 1.1
    # with 5 standard errors either side.
    from scipy import stats

    rng = np.random.default_rng(seed(16))
    maps, covered, estimates, halves = 400, 0, [], []
    for i in range(maps):
        exponent = 0.5 if i % 2 else 0.75
        b = fit_boundary(_synthetic_cells(rng, exponent), 0.01, rng=rng, replicates=1000)
        covered += b.low <= exponent <= b.high
        estimates.append(b.exponent - exponent)
        halves.append((b.high - b.low) / 2)
    assert stats.binom.ppf(0.001, maps, 0.95) <= covered < maps, covered
    ratio = np.mean(halves) / (1.96 * np.std(estimates, ddof=1))
    assert 0.8 < ratio < 1.3, ratio
    # derived: the interpolated crossing of the true probabilities is exact (log p linear in
    # log gap), so the estimate's mean error over the maps is zero within 4 standard errors
    assert abs(np.mean(estimates)) < 4 * np.std(estimates, ddof=1) / math.sqrt(maps)


def test_bootstrap_crossings_equal_the_scalar_crossings():
    # the bootstrap finds crossings for all replicates at once; on one replicate it must give
    # exactly the critical gaps of the scalar scan (same rule: the uppermost crossing, none
    # when even the largest gap exceeds the risk), here on maps with small and large counts
    from crn.analyses.regimes import _critical_gaps, _critical_gaps_many

    rng = np.random.default_rng(seed(18))
    for _ in range(50):
        cells = _synthetic_cells(rng, 0.5, runs=int(rng.integers(50, 2000)))
        p = np.array([[c.p_wrong for c in cells]])
        ns, log_gaps = _critical_gaps_many(cells, 0.01, p)
        many = {int(n): math.exp(g) for n, g in zip(ns, log_gaps[0], strict=True)
                if np.isfinite(g)}
        one = dict(_critical_gaps(cells, 0.01, p[0]))
        assert many.keys() == one.keys()
        assert [many[n] for n in one] == pytest.approx(list(one.values()), rel=1e-12)


def test_too_few_bracketed_n_give_no_exponent_and_merged_fractions_are_reported():
    # derived: a line through two points always fits, so two crossings say nothing about a
    # power law; with two bracketed n there is no exponent, only the reason
    cells = [c for c in _synthetic_cells(np.random.default_rng(seed(17)), 0.5)
             if c.n in (100, 1000)]
    b = fit_boundary(cells, 0.01, rng=1)
    assert b.exponent is None and b.low is None and len(b.critical_gaps) == 2
    assert "too few" in b.describe() and b.to_dict()["bracketed"] == 2
    # derived: the fractions 0.1 and 0.12 both round to gap 2 at n = 20 (2 and 2.4, gap even)
    # and to gap 4 at n = 40 (4 and 4.8)
    result = regime_map(InitialSplit(load_model(AM).network), [20, 40],
                        gap_fractions=[0.1, 0.12, 0.5], method="exact", rng=1)
    assert list(result.merged) == [{"n": 20, "gap": 2, "gap_fractions": [0.1, 0.12]},
                                   {"n": 40, "gap": 4, "gap_fractions": [0.1, 0.12]}]
    assert [(c.n, c.gap) for c in result.cells] == [(20, 2), (20, 10), (40, 4), (40, 20)]
    assert result.boundary.exponent is None


def test_regimes_command_says_too_few_and_merged(tmp_path):
    import json

    from click.testing import CliRunner

    from crn.cli import cli

    args = ["regimes", AM, "--n", "20,40", "--gap-fractions", "0.1,0.12,0.5",
            "--method", "exact", "--seed", "1"]
    text = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert text.exit_code == 0
    assert "merged: at n=20 the gap fractions 0.1, 0.12 all round to gap 2" in text.stdout
    assert "too few n with a crossing" in text.stdout and "n^" not in text.stdout
    data = json.loads(CliRunner().invoke(cli, args + ["--json"]).stdout)
    assert data["exponent"]["estimate"] is None and data["exponent"]["low"] is None
    assert "too few" in data["exponent"]["note"]
    assert [m["n"] for m in data["merged"]] == [20, 40]


def test_exact_cells_are_exact_probabilities(am_map):
    # exact absorption: the eventual error is exact (low); high adds only Cantelli's bound on
    # consensus after the horizon, small when the horizon is 10x the ODE time
    for c in am_map.cells:
        assert c.method == "exact" and c.runs == 0
        assert 0 <= c.high - c.low < 0.01


def _runs_cover_exact(sampled, exact, alpha):
    """The runs' Clopper-Pearson interval at level 1 - alpha / K meets the exact interval.

    derived: the sampled cell stops at a data-dependent look, so the interval must hold at
    every one of the K looks the rounds can make (Bonferroni over looks, as the cell's own
    interval does at 0.05); the exact cell brackets the probability by [low, high]. A
    correct engine fails this check with probability at most alpha.
    """
    from scipy import stats

    looks = len(look_schedule(400))  # the runs_max of the cells below
    a = alpha / looks
    k, runs = sampled.wrong, sampled.runs
    low = stats.beta.ppf(a / 2, k, runs - k + 1) if k > 0 else 0.0
    high = stats.beta.isf(a / 2, k + 1, runs - k) if k < runs else 1.0
    return low <= exact.high and exact.low <= high


def test_exact_and_stochastic_intervals_overlap():
    # both estimate the same probability: the runs' interval (_runs_cover_exact, level
    # 0.001 / 3 per cell, Bonferroni over the three cells) must meet the exact one
    nets = InitialSplit(load_model(AM).network)
    for n, gap in [(60, 6), (120, 20), (200, 40)]:
        exact = evaluate_cell(nets, n, gap, method="exact", entropy=7)
        sampled = evaluate_cell(nets, n, gap, method="stochastic", runs_max=400,
                                entropy=seed(7))
        assert sampled.runs >= 50
        assert _runs_cover_exact(sampled, exact, 0.001 / 3), (exact, sampled)
        assert exact.ode_label == sampled.ode_label == "X"


def test_seeded_cells_do_not_depend_on_order_or_workers():
    nets = InitialSplit(load_model(AM).network)
    one = regime_map(nets, [300, 600], gaps=[10, 30], method="stochastic", runs_max=100, rng=5)
    two = regime_map(nets, [600, 300], gaps=[30, 10], method="stochastic", runs_max=100, rng=5,
                     workers=2)
    by_key = {(c.n, c.gap): c for c in two.cells}
    for c in one.cells:
        assert by_key[(c.n, c.gap)] == c


def test_four_state_exact_majority_never_misleads_and_slows_with_smaller_gap():
    # Mertzios et al. 2014/2017: the four-state protocol is always correct, so it never
    # disagrees with the ODE's (correct) label. Alistarh, Gelashvili, Vojnovic PODC 2015 and
    # Draief, Vojnovic 2012: its time grows as the margin shrinks, like 1 / epsilon.
    net = load_model(EM).network
    gaps = [2, 4, 8, 16, 32]
    result = regime_map(InitialSplit(net), [64, 128], gaps=gaps, rng=seed(3), method="exact")
    for c in result.cells:
        assert c.flag == "ok"
        assert c.low == pytest.approx(0.0, abs=1e-9)
        assert c.ode_label == "A"
    for n in (64, 128):
        cells = sorted((c for c in result.cells if c.n == n), key=lambda c: c.gap)
        ode = [c.ode_time for c in cells]
        ssa = [c.ssa_median_time for c in cells]
        assert all(a > b for a, b in zip(ode, ode[1:], strict=False))
        assert all(a > b for a, b in zip(ssa, ssa[1:], strict=False))
        # slope of log time against log gap near -1 (Omega(1/epsilon)); derived bound: the last
        # phase (weak minority converted by `gap` strong agents) takes about n ln(n) / (2 gap)
        slope = np.polyfit(np.log(gaps), np.log(ssa), 1)[0]
        assert -1.3 < slope < -0.6, slope


def test_fit_boundary_recovers_a_planted_exponent():
    # derived: with p(n, gap) = exp(-gap^2 / n), the gap where p = risk is sqrt(n ln(1/risk)),
    # an exponent of exactly 1/2
    from crn.analyses.regimes import RegimeCell

    risk = 0.01
    cells = []
    for n in (100, 1000, 10000, 100000):
        for g in np.geomspace(0.3, 5, 25) * math.sqrt(n):
            p = math.exp(-(g * g) / n)
            cells.append(RegimeCell(n, float(g), "X", 1.0, p, p, p, 0, 0, "ok", "ok", 1.0,
                                    "exact", 10.0))
    b = fit_boundary(cells, risk)
    # no sampling noise here: the only error is linear interpolation in (log gap, log p)
    # between grid gaps 12% apart (25 log-spaced points over a factor 16.7), where log p is
    # smooth in log gap; that error is far below the 2% and 0.01 allowed
    assert b.exponent == pytest.approx(0.5, abs=0.01)
    for n, g in b.critical_gaps:
        assert g == pytest.approx(math.sqrt(n * math.log(1 / risk)), rel=0.02)


def test_exact_and_stochastic_overlap_without_ode_consensus():
    # the voter model's mean field is neutral (no ODE consensus), so a run agrees with the ODE
    # when it has no consensus by the horizon: the exact interval is [P(consensus) - Cantelli
    # bound on consensus after the horizon, P(consensus)], not [1, 1]; both intervals must
    # cover the same probability (the runs' interval at level 0.001, _runs_cover_exact)
    nets = InitialSplit(load_model(VOTER).network)
    exact = evaluate_cell(nets, 400, 40, method="exact", entropy=7)
    sampled = evaluate_cell(nets, 400, 40, method="stochastic", runs_max=400,
                            entropy=seed(7))
    assert exact.ode_label is None and sampled.ode_label is None
    # derived: the voter model reaches consensus with probability 1 on a complete graph
    assert exact.high == pytest.approx(1.0) and exact.p_wrong == exact.high
    assert exact.low < 0.95
    assert _runs_cover_exact(sampled, exact, 0.001), (exact, sampled)


def test_late_consensus_bound_is_conditional_on_absorption():
    # derived: E[tau | absorbed] = 10, sd 5, horizon 20: Cantelli gives 25 / (25 + 100) = 0.2
    # for the absorbed runs, so the unconditional mass after the horizon is P(absorbed) * 0.2
    probabilities = {"X": 0.5, "Y": 0.1, "none": 0.4}
    assert late_consensus_bound(probabilities, 10.0, 5.0, 20.0) == pytest.approx(0.6 * 0.2)
    # on one label the mass after the horizon is also at most that label's probability
    assert late_consensus_bound(probabilities, 10.0, 5.0, 20.0, "Y") == pytest.approx(0.1)
    assert late_consensus_bound(probabilities, 10.0, 5.0, 20.0, "X") == pytest.approx(0.12)
    # a horizon at or before the mean bounds nothing beyond P(absorbed)
    assert late_consensus_bound(probabilities, 10.0, 5.0, 5.0) == pytest.approx(0.6)


def test_simultaneous_interval_is_bonferroni_clopper_pearson():
    # derived: for 0 successes the Clopper-Pearson upper bound at level 1 - a solves
    # (1 - p)^n = a / 2; with K looks a = 0.05 / K (Bonferroni)
    assert look_schedule(1000) == (50, 100, 200, 400, 800, 1000)
    assert look_schedule(30) == (30,)
    for looks in (1, 6):
        p, low, high = simultaneous_interval(0, 50, looks)
        assert (p, low) == (0.0, 0.0)
        assert high == pytest.approx(1 - (0.025 / looks) ** (1 / 50), rel=1e-9)


def test_sequential_stopping_keeps_false_misleading_rate():
    # derived: `misleading` at true p = risk needs the lower bound above p at some look; each
    # look's Clopper-Pearson bound at level 1 - 0.05 / K exceeds p with probability at most
    # 0.025 / K (exact one-sided tail), so by the union bound over the K looks the rate is at
    # most 0.025. Simulated with binomial counts (fixed seed, 20,000 repetitions); tolerance
    # 4 standard errors of a proportion 0.025: 4 sqrt(0.025 * 0.975 / 20000).
    reps, risk = 20_000, 0.01
    tolerance = 0.025 + 4 * math.sqrt(0.025 * 0.975 / reps)
    # the regimes default (ok side front-loaded) and the copies default (even split)
    for runs_max, favour in ((1000, "below"), (4000, None)):
        rng = np.random.default_rng(seed(20240601 + runs_max))
        misleading = 0
        for _ in range(reps):
            state = [0, 0]

            def draw(_round, size, state=state, rng=rng):
                state[0] += int(rng.binomial(size, risk))
                state[1] += size

            est = sample_until_decided(lambda state=state: tuple(state), draw, risk, runs_max,
                                       favour=favour)
            misleading += risk_flag(est.low, est.high, risk) == "misleading"
        assert misleading / reps <= tolerance, (runs_max, misleading / reps)


def test_look_levels_spend_each_side_once():
    # derived: the upper bound of c disagreements in n runs is below the risk r exactly when
    # P(Bin(n, r) <= c) is below its level. At r = 0.01 and looks (50, 100, 200, 400, 800,
    # 1000) the even split (0.025 / 6 = 0.00417 per look) decides ok with at most 1 of 800
    # (P = 0.00293) and 2 of 1000 (P = 0.00268) and never at 400 (0 of 400: P = 0.99^400 =
    # 0.01795); those needs leave 0.01939 of the 0.025, enough for 0 of 400, and the last
    # 0.00144 is spread over the six looks
    from scipy.stats import binom

    schedule = look_schedule(1000)
    levels = look_levels(schedule, 0.01, favour="below")
    assert sum(lo for lo, _ in levels) == pytest.approx(0.025, rel=1e-12)
    assert sum(hi for _, hi in levels) == pytest.approx(0.025, rel=1e-12)
    assert all(lo == pytest.approx(0.025 / 6) for lo, _ in levels)  # lower side: Bonferroni
    his = [hi for _, hi in levels]
    needs = [0.0, 0.0, 0.0, 0.99 ** 400, binom.cdf(1, 800, 0.01), binom.cdf(2, 1000, 0.01)]
    spread = (0.025 - sum(needs)) / 6
    assert spread > 0
    assert his == pytest.approx([need + spread for need in needs], rel=1e-9)
    # every ok decision of the even split is kept, and 0 of 400 is added
    even = [simultaneous_interval(k, n, 6)[2] < 0.01 for k, n in ((1, 800), (2, 1000))]
    kept = [sided_interval(k, n, *levels[i])[2] < 0.01 for k, n, i in ((1, 800, 4), (2, 1000, 5))]
    assert even == kept == [True, True]
    assert sided_interval(2, 800, *levels[4])[2] > 0.01 < simultaneous_interval(2, 800, 6)[2]
    assert sided_interval(0, 400, *levels[3])[2] < 0.01 < simultaneous_interval(0, 400, 6)[2]
    # mirror image for a threshold near 1 (a success probability against 1 - risk)
    mirror = look_levels(schedule, 0.99, favour="above")
    assert [lo for lo, _ in mirror] == pytest.approx(his)
    # nothing to add (risk 0.001: no disagreement needs 3,688 runs): the even split
    assert look_levels(schedule, 0.001, favour="below") == look_levels(schedule, 0.001)
    # equal levels are the two-sided Clopper-Pearson interval of simultaneous_interval
    assert sided_interval(3, 400, 0.025 / 6, 0.025 / 6) == pytest.approx(
        simultaneous_interval(3, 400, 6), rel=1e-9)


@pytest.mark.parametrize("favour", [None, "below"])
def test_sequential_stopping_keeps_false_ok_rate(favour):
    # derived: `ok` at true p = risk needs the upper bound below p at some look; look k's bound
    # falls below p with probability at most its one-sided level (exact binomial tail), and the
    # levels of the K looks add up to 0.025 (look_levels), so by the union bound the rate is at
    # most 0.025. Simulated with binomial counts (fixed seed, 20,000 repetitions); tolerance 4
    # standard errors of a proportion 0.025.
    reps, risk = 20_000, 0.01
    tolerance = 0.025 + 4 * math.sqrt(0.025 * 0.975 / reps)
    rng = np.random.default_rng(seed(20261204))
    wrong_ok = 0
    for _ in range(reps):
        state = [0, 0]

        def draw(_round, size, state=state):
            state[0] += int(rng.binomial(size, risk))
            state[1] += size

        est = sample_until_decided(lambda state=state: tuple(state), draw, risk, 1000,
                                   favour=favour)
        wrong_ok += risk_flag(est.low, est.high, risk) == "ok"
    assert wrong_ok / reps <= tolerance, wrong_ok / reps


def test_an_ok_cell_stops_at_the_first_look_that_can_decide():
    # a gap of 30% at n = 2000 leaves approximate majority (almost) never wrong: derived from
    # Angluin, Aspnes, Eisenstat 2008 (error probability falls like exp(-c gap^2 / n)); with no
    # disagreement the cell is ok at 400 runs (test_look_levels_spend_each_side_once), where
    # the even split needed 800
    nets = InitialSplit(load_model(AM).network)
    cell = evaluate_cell(nets, 2000, 600, method="stochastic", entropy=seed(11))
    assert (cell.flag, cell.wrong, cell.runs) == ("ok", 0, 400)


def test_large_protocol_cells_run_batched(monkeypatch):
    import crn.analyses.regimes as regimes

    seen = []

    def record(net, runs, until, rng, **kw):
        seen.append(kw.get("engine"))
        return ["X"] * runs, np.full(runs, 1.0)

    monkeypatch.setattr(regimes, "stochastic_decisions", record)
    nets = InitialSplit(load_model(AM).network)
    evaluate_cell(nets, regimes.BATCHED_FROM, 100, method="stochastic", entropy=1, runs_max=50)
    evaluate_cell(nets, 1000, 100, method="stochastic", entropy=1, runs_max=50)
    assert seen == ["batched", "auto"]


def test_censored_median_is_flagged_slower():
    # more than half the runs have no consensus by the horizon, so the median exceeds it;
    # a horizon of at least factor * ODE time makes the runs slower by more than the factor
    assert time_flag(None, 10.0, 2.0, censored_at=20.0) == "slower"
    assert time_flag(None, 10.0, 2.0, censored_at=100.0) == "slower"
    assert time_flag(None, 10.0, 2.0, censored_at=15.0) == "unknown"
    assert time_flag(None, 10.0, 2.0) == "unknown"
    assert time_flag(None, None, 2.0, censored_at=100.0) == "unknown"
    assert time_flag(30.0, 10.0, 2.0) == "slower"
    assert time_flag(4.0, 10.0, 2.0) == "faster"
    assert time_flag(15.0, 10.0, 2.0) == "ok"
