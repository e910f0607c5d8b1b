"""Copy numbers: smallest population for a risk and deadline (crn.copies, crn copies)."""

import json

import pytest
from click.testing import CliRunner
from seeds import seed

from crn.cli import cli, main
from crn.copies import lattice, physical_outputs, smallest_n
from crn.errors import CRNError
from crn.exact import exact_outcomes, transient_outcomes
from crn.io.models import load_model
from crn.probes import InitialSplit
from crn.units import AVOGADRO

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
