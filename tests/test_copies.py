"""Copy numbers: smallest population for a risk and deadline (crn.analyses.copies, crn copies)."""

import functools
import json

import numpy as np
import pytest
from click.testing import CliRunner
from seeds import seed

from crn.analyses.copies import Prober, lattice, physical_outputs, smallest_n
from crn.analyses.probes import InitialSplit, stochastic_decisions
from crn.cli import cli, main
from crn.core.errors import CRNError
from crn.core.outcome import correct_label
from crn.core.stats import wilson_interval
from crn.core.units import AVOGADRO
from crn.io.models import load_model
from crn.solvers.exact import exact_outcomes, transient_outcomes

AM = "models/approximate_majority.toml"


def _exact_smallest(nets, lat, target, deadline=None):
    """Direct scan over the lattice with the exact engine: the first n meeting the target."""
    for k in range(200):
        n = lat.n(k)
        net = nets(n, lat.gap_of(n))
        if deadline is None:
            p = exact_outcomes(net).probabilities["X"]
        else:
            p = transient_outcomes(net, deadline)["X"]
        if p >= target:
            return n
    raise AssertionError("no n found")


def test_lattice_keeps_the_gap_exact():
    # derived: F = p/q, n = q t gives gap = p t; parity needs t (q - p) even
    lat = lattice(0.05)  # 1/20: q - p = 19 odd -> step 40
    assert (lat.first, lat.step) == (40, 40)
    assert [lat.gap_of(lat.n(k)) for k in range(3)] == [2, 4, 6]
    lat = lattice(0.2)  # 1/5: q - p = 4 even -> step 5
    assert [(lat.n(k), lat.gap_of(lat.n(k))) for k in range(3)] == [(5, 1), (10, 2), (15, 3)]
    lat = lattice(gap=6)
    assert [lat.n(k) for k in range(3)] == [8, 10, 12]


def test_stochastic_search_interval_contains_exact_smallest_n():
    # the exact engine scanned over every lattice n is the reference (Kemeny-Snell absorption);
    # the stochastic search must bracket it: [low, high] come from 95% Clopper-Pearson bounds
    # simultaneous over the sequential looks (Bonferroni)
    nets = InitialSplit(load_model(AM).network)
    risk = 0.05
    exact_n = _exact_smallest(nets, lattice(0.2), 1 - risk)
    result = smallest_n(nets, gap_fraction=0.2, risk=risk, method="stochastic", rng=seed(11),
                        runs_max=4000)
    assert result.low <= exact_n <= result.high, (result.low, exact_n, result.high)
    assert result.ended == "found"
    assert result.low <= result.estimate <= result.high
    assert "stochastic" in result.method
    exact = smallest_n(nets, gap_fraction=0.2, risk=risk, method="exact", rng=11)
    assert exact.estimate == exact.low == exact.high == exact_n


def test_deadline_search_matches_transient_scan():
    # Munsky-Khammash finite state projection (exact when the whole space fits) as reference
    nets = InitialSplit(load_model(AM).network)
    risk, deadline = 0.1, 20.0
    exact_n = _exact_smallest(nets, lattice(0.2), 1 - risk, deadline)
    result = smallest_n(nets, gap_fraction=0.2, risk=risk, deadline=deadline, rng=2)
    assert result.estimate == exact_n
    # a deadline can only make the needed population larger
    eventual = smallest_n(nets, gap_fraction=0.2, risk=risk, rng=2)
    assert eventual.estimate <= result.estimate


def test_physical_outputs():
    # docs/design.md: n = C V N_A; one unit of parallel time = 1 / (k C) s
    out = physical_outputs(6022, concentration_molar=1e-8, rate=1e6, parallel_time=20.0)
    assert out["volume_liters"] == pytest.approx(6022 / (1e-8 * AVOGADRO))
    assert out["seconds"] == pytest.approx(2000.0)
    assert out["hours"] == pytest.approx(2000.0 / 3600)
    out = physical_outputs(6022, volume_liters=1e-12)
    assert out["concentration_molar"] == pytest.approx(6022 / (1e-12 * AVOGADRO))
    assert out["seconds"] is None


def test_cli_json_keys_and_units():
    runner = CliRunner()
    result = runner.invoke(cli, ["copies", AM, "--gap-fraction", "0.2", "--risk", "0.05",
                                 "--concentration", "10nM", "--rate", "1e6/M/s", "--seed", "4",
                                 "--method", "exact", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert set(data["n"]) == {"estimate", "low", "high"}
    n = data["n"]["estimate"]
    assert data["concentration_molar"] == pytest.approx(1e-8)
    assert data["volume_liters"] == pytest.approx(n / (1e-8 * AVOGADRO))
    assert data["seconds"] == pytest.approx(data["median_time"] / (1e6 * 1e-8))
    result = runner.invoke(cli, ["copies", AM, "--gap-fraction", "0.2", "--json",
                                 "--method", "exact"])
    assert json.loads(result.output)["seconds"] is None


def test_tie_gap_rejected(capsys):
    # a gap of 0 is a tie: no majority to find
    with pytest.raises(CRNError, match="--gap"):
        lattice(gap=0)
    assert main(["copies", AM, "--gap", "0", "--json"]) == 2
    assert "--gap" in capsys.readouterr().err


def test_search_records_why_it_ended():
    # derived: at gap fraction 0.2 and risk 0.05 the exact smallest n exceeds the first lattice
    # point (5); with n_max = 5 nothing qualifies and the search ends at n_max
    nets = InitialSplit(load_model(AM).network)
    exact_n = _exact_smallest(nets, lattice(0.2), 0.95)
    assert exact_n > 5
    result = smallest_n(nets, gap_fraction=0.2, risk=0.05, method="exact", n_max=5, rng=1)
    assert result.estimate is None and result.ended == "n_max"


# --- the reported n is on the safe side -------------------------------------------------------

US = "models/undecided_state.toml"
DROPLET = "models/droplet_assay.toml"


@functools.cache
def _safe_answer(path, fraction, risk, seed, deadline=None):
    nets = InitialSplit(load_model(path).network)
    result = smallest_n(nets, gap_fraction=fraction, risk=risk, deadline=deadline,
                        method="stochastic", rng=seed, runs_max=4000)
    return nets, result


@pytest.mark.parametrize("path, fraction, risk, deadline", [
    (AM, 0.2, 0.02, None),      # three-state approximate majority, eventual decision
    (US, 0.1, 0.05, 30.0),      # undecided-state dynamics, by a deadline
])
def test_reported_n_survives_an_independent_check(path, fraction, risk, deadline):
    # The guarantee: at the reported n the 95% upper bound of P(wrong) lies below the risk and
    # one lattice step below it does not. Independent check: 20,000 fresh runs at the reported n
    # with another seed; the true P(wrong) is below the risk, so the Wilson 95% lower bound
    # (Wilson, JASA 22(158), 1927) of the fresh estimate must lie below it too (it fails with
    # probability <= 2.5% if the answer were exactly at the risk, far less below it).
    nets, result = _safe_answer(path, fraction, risk, seed=17, deadline=deadline)
    assert result.ended == "found" and result.estimate is not None
    at, below = result.at_estimate, result.at_below
    assert at.method == "stochastic" and at.p_wrong[2] < risk
    assert below is not None and below.n == result.estimate - lattice(fraction).step
    assert below.p_wrong[2] >= risk
    assert result.low <= result.estimate == result.high
    net = nets(result.estimate, result.gap_estimate)
    horizon = deadline if deadline is not None else Prober(nets)._horizon(net, None)
    labels, times = stochastic_decisions(net, 20_000, horizon, np.random.SeedSequence(90210),
                                         workers=1)
    truth = correct_label(net)
    wrong = sum(1 for label in labels if label != truth)
    _, low, _ = wilson_interval(wrong, 20_000)
    assert low < risk, (result.estimate, wrong)


def test_reported_n_meets_the_risk_exactly_where_the_chain_fits():
    # reference: the exact chain (Kemeny-Snell absorption) at the reported n and one step below
    nets, result = _safe_answer(AM, 0.2, 0.02, seed=17, deadline=None)
    exact = exact_outcomes(nets(result.estimate, result.gap_estimate), absorb="first")
    assert 1 - exact.probabilities["X"] < 0.02
    exact_n = _exact_smallest(nets, lattice(0.2), 0.98)
    assert exact_n <= result.estimate


def test_regime_map_never_flags_misleading_above_the_reported_n():
    # a cell flagged misleading (P(disagree) surely above the risk) at the same gap fraction
    # cannot lie at or above the n that copies reports as surely within the risk
    from crn.analyses.regimes import regime_map

    nets = InitialSplit(load_model(DROPLET).network)
    fraction, risk = 0.2, 0.05
    result = smallest_n(nets, gap_fraction=fraction, risk=risk, method="stochastic", rng=3)
    ns = [10, 20, 30, 40, 50, 60, 70, 80, 90, 100, 120, 150]
    rmap = regime_map(nets, ns, gap_fractions=[fraction], risk=risk, method="stochastic",
                      runs_max=4000, rng=4, workers=1)
    flagged = [c.n for c in rmap.cells if c.flag == "misleading"]
    assert flagged, "the grid must reach into the misleading region for the test to mean much"
    assert max(flagged) < result.estimate, (flagged, result.estimate)
    # and the map's ok cells do not all lie below the answer's bracket either
    assert any(c.flag == "ok" and c.n >= result.estimate for c in rmap.cells)


def test_cli_reports_bracket_interval_and_caution():
    runner = CliRunner()
    result = runner.invoke(cli, ["copies", AM, "--gap-fraction", "0.2", "--risk", "0.05",
                                 "--concentration", "10nM", "--rate", "1e6/M/s", "--deadline",
                                 "1h", "--seed", "4", "--method", "exact", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    # cautions travel with the wet-lab numbers
    assert "model" in data["caution"] and "safety" in data["caution"]
    assert data["volume_liters"] is not None and data["hours"] is not None
    assert data["bracket"]["passes"] == data["n"]["estimate"]
    assert data["bracket"]["fails"] == data["n"]["estimate"] - 5
    assert data["p_wrong"]["high"] < 0.05 <= data["p_wrong_below"]["high"]
    assert data["loading"] == "fixed" and data["risk_parts"] is None
    text = runner.invoke(cli, ["copies", AM, "--gap-fraction", "0.2", "--risk", "0.05",
                               "--concentration", "10nM", "--seed", "4", "--method", "exact"])
    assert text.exit_code == 0
    assert "one step below" in text.output and "safety practice" in text.output


def test_cli_rejects_unknown_loading(capsys):
    assert main(["copies", AM, "--gap-fraction", "0.2", "--loading", "binomial"]) == 2
    assert "--loading" in capsys.readouterr().err
