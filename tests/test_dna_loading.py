"""`copies --implement` with droplet loading, and the run budget a risk needs."""

import json

import pytest

from crn.analyses.design_questions import (
    LoadedCells,
    implementation_copies,
    leak_tolerance,
    risk_floor,
    runs_for_risk,
)
from crn.analyses.implemented import ImplementedCells
from crn.analyses.probes import InitialSplit
from crn.cli import main
from crn.core.errors import CRNError
from crn.core.loading import reversal_probability
from crn.dna import DnaParameters
from crn.io.models import load_model

DROPLET = "crn/data/droplet_assay.toml"
C = 1e-8


def _droplet():
    return load_model(DROPLET).network


def _copies(capsys, loading):
    args = ["copies", DROPLET, "--gap-fraction", "0.3", "--risk", "0.1", "--implement", "ssw",
            "--fuel", "30nM", "--runs-max", "100", "--n-max", "100", "--seed", "11",
            "--loading", loading, "--json"]
    assert main(args) == 0
    return json.loads(capsys.readouterr().out)


def test_poisson_loading_never_needs_fewer_copies_than_fixed(capsys):
    """Same risk, seed and implementation; the lattice is n = 20, 40, ... (gap 0.3 n, even).
    derived: at n = 20 a Poisson droplet (means 13 and 7) holds the minority strain at
    least as often as the majority with probability 0.107 (exact, Skellam; Skellam, J. R.
    Stat. Soc. 109(3):296, 1946), above the risk 0.1 on its own; such a droplet decides
    wrongly about half the time or more, and the kinetics add about 0.09 (the fixed-loading
    error at n = 20 measured here), so P(wrong) ~ 0.15 there and its 95% upper bound falls
    below 0.1 with probability well under 1% at 100 runs: the Poisson answer is at least
    40. Fixed loading passes at 40 (P(wrong) about 0.02 there, so its 95% upper bound lies
    below 0.1 in about 95% of seeds; here it does), so its answer is 20 or 40."""
    fixed, poisson = _copies(capsys, "fixed"), _copies(capsys, "poisson")
    assert fixed["loading"] == "fixed" and poisson["loading"] == "poisson"
    n_fixed, n_poisson = fixed["n"]["estimate"], poisson["n"]["estimate"]
    assert n_fixed is not None and n_poisson is not None
    assert n_fixed <= 40 <= n_poisson
    assert poisson["risk_parts"] is not None  # loading and kinetics shares of P(wrong)
    at_20 = next(p for p in poisson["probes"] if p["n"] == 20)
    assert at_20["reversal"] == pytest.approx(reversal_probability(20, 6), rel=1e-12)
    assert at_20["reversal"] > 0.1
    assert poisson["implementation"]["scheme"] == "ssw"


def test_droplets_of_a_loaded_sample_share_volume_and_fuel():
    """derived: around a mean of n = 100 molecules at C = 10 nM the droplet volume is
    V = n / (C N_A); a droplet that received t = 50 holds C t / n = 5 nM of signal, keeps
    the fuel at 30 nM (so the same ~F V N_A fuel molecules: 30 nM x V N_A = 300, times the
    volume convention (t - 1) / t of the protocol network, 294 at t = 50 and 297 at
    t = 100), and its formal time unit 1 / (rate C_t) is n / t = 2 times the mean's. A
    droplet with more signal than fuel (t = 400, 40 nM > 30 nM) is built, not refused."""
    cells = ImplementedCells(InitialSplit(_droplet()), "ssw",
                             DnaParameters(rate=1e5, concentration=C, fuel=3e-8))
    droplets = LoadedCells(cells).droplets(100)
    mean, half = droplets.implementation(100, 20), droplets.implementation(50, 10)
    assert mean.params.concentration == pytest.approx(C, rel=1e-12)
    assert half.params.concentration == pytest.approx(C / 2, rel=1e-12)
    assert half.params.fuel_molar == mean.params.fuel_molar == pytest.approx(3e-8)
    net_half, net_mean = half.network, mean.network
    assert net_half.initial[net_half.index["L_r1"]] == 294
    assert net_mean.initial[net_mean.index["L_r1"]] == 297
    assert half.params.seconds_per_time_unit == pytest.approx(
        2 * mean.params.seconds_per_time_unit, rel=1e-12)
    crowded = droplets.implementation(400, 80)
    assert crowded.params.concentration > crowded.params.fuel_molar
    # the mean droplet is the cell the fixed-loading search uses
    assert LoadedCells(cells)(100, 20).species == cells(100, 20).species


def test_risk_floor_of_a_run_budget():
    """derived: looks at 50, 100, 200, 400 runs, each a two-sided Clopper-Pearson interval
    at level 1 - 0.05 / 4 (Bonferroni over the looks, as crn.analyses.probes); with all R
    runs correct its upper end for P(wrong) is 1 - (0.0125 / 2)^(1/R) (Clopper & Pearson,
    Biometrika 26:404, 1934, the x = n case): 0.01261 at R = 400, above a risk of 1%; the
    fewest runs below it lie between 500 and 600."""
    assert risk_floor(400) == pytest.approx(1 - 0.00625 ** (1 / 400), rel=1e-9)
    assert risk_floor(400) > 0.01
    needed = runs_for_risk(0.01)
    assert 500 < needed <= 600
    assert risk_floor(needed) < 0.01


def test_too_few_runs_is_the_reason_when_the_budget_cannot_certify_the_risk():
    """50 runs at one look cannot certify a risk of 5% (floor 1 - 0.025^(1/50) = 0.071,
    derived as above), so no droplet size works whatever n, and the diagnosis says so
    instead of blaming the circuit (its mean field decides)."""
    assert risk_floor(50) == pytest.approx(1 - 0.025 ** (1 / 50), rel=1e-9)
    answer = implementation_copies(
        InitialSplit(_droplet()), "ssw", DnaParameters(rate=1e5, concentration=C, fuel=3e-8),
        gap_fraction=0.3, risk=0.05, n_max=60, runs_max=50, rng=3, with_formal=False)
    assert answer.verdict == "no droplet size works"
    d = answer.diagnosis
    assert d.reason == "too few runs" and d.runs_max == 50
    assert d.risk_floor == pytest.approx(risk_floor(50))
    assert d.runs_needed == runs_for_risk(0.05)
    assert "--runs-max" in d.text()


def test_leak_tolerance_refuses_a_budget_that_cannot_certify_the_risk():
    """400 runs cannot certify 1% (floor 0.0126, test above): every leak level, leak 0
    included, would fail, so the question is refused before any run, naming the budget."""
    with pytest.raises(CRNError, match="runs_max = 400 .* at least 5"):
        leak_tolerance(InitialSplit(_droplet()), 60, 30, "ssw",
                       DnaParameters(rate=1e6, concentration=C, fuel=1e-7), risk=0.01,
                       runs_max=400, rng=1)
