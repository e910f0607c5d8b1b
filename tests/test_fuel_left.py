"""Fuel left at the runs' horizon (crn.analyses.implemented.fuel_left_at_horizon), from the
runs or, when they were reduced on the fly, from their time course; and ``crn ssa
--implement`` reporting it."""

import dataclasses
import json

import numpy as np
import pytest

from crn.analyses.implemented import fuel_left_at_horizon, fuel_left_runs, implementation_of
from crn.cli import main
from crn.core.network import Network, Reaction
from crn.dna import DnaParameters
from crn.solvers.simulate import simulate
from crn.solvers.time_course import TimeCourseAccumulator

MODEL = ('name = "convert"\n[initial]\nX = 10\n[network]\nvolume = 10\n'
         'reactions = [{ reaction = "X -> Y", rate = 1 }]\n[output]\nX = "x"\nY = "y"\n')


def _convert():
    """derived: X -> Y on 10 molecules at 10 nM with fuel at 100 nM: the three-domain
    construction (Soloveichik, Seelig & Winfree, PNAS 107:5393, 2010) gives one gate G and
    one translator T per firing, 100 molecules of each (10 x 100 nM / 10 nM)."""
    net = Network.from_reactions("convert", ["X", "Y"], [Reaction({"X": 1}, {"Y": 1}, 1.0)],
                                 volume=10.0, initial={"X": 10}, output={"X": "x", "Y": "y"})
    impl = implementation_of(net, "ssw", DnaParameters(rate=1e5, concentration=1e-8,
                                                       fuel=1e-7))
    assert {s: int(impl.network.initial[impl.network.index[s]]) for s in impl.fuel} == {
        "G_r1": 100, "T_r1": 100}
    return impl


# derived: each X meets a gate at rate at least 0.1 x 90 / 10 = 0.9 per time unit (G never
# drops below 90), so P(some X unconverted at t = 50) <= 10 e^(-45); the translator step is
# 60x faster. Every run has then fired 10 times: 90 of 100 of each fuel left, 0.9 exactly.
UNTIL = 50.0
LEFT = {"G_r1": 0.9, "T_r1": 0.9}


def test_fuel_left_from_the_runs_last_samples():
    impl = _convert()
    ensemble = simulate(impl.network, runs=6, until=UNTIL, rng=2, workers=1)
    left = fuel_left_at_horizon(impl, ensemble)
    assert left == pytest.approx(LEFT, abs=1e-12)
    assert left == fuel_left_runs(impl, ensemble)


def test_fuel_left_from_the_time_course_when_the_ensemble_has_no_sample():
    impl = _convert()
    net = impl.network
    times = np.linspace(0.0, UNTIL, 6)
    accumulator = TimeCourseAccumulator(times, net.species, 6, rng=3)
    ensemble = simulate(net, runs=6, until=UNTIL, times=times, rng=3, workers=1,
                        reduce=accumulator)
    course = accumulator.result()
    assert course.runs == 6 and course.times[-1] == UNTIL
    bare = dataclasses.replace(ensemble, times=ensemble.times[:0],
                               counts=ensemble.counts[:, :0, :])
    assert fuel_left_runs(impl, bare) == {}
    assert fuel_left_at_horizon(impl, bare, course) == pytest.approx(LEFT, abs=1e-12)
    assert fuel_left_at_horizon(impl, bare) == {}  # neither source has a sample
    # with samples the runs speak, and agree with the course's last mean
    assert fuel_left_at_horizon(impl, ensemble, course) == pytest.approx(LEFT, abs=1e-12)


def test_ssa_implement_reports_the_fuel_left_with_and_without_every(capsys, tmp_path):
    model = tmp_path / "convert.toml"
    model.write_text(MODEL, encoding="utf-8")
    args = ["ssa", str(model), "--implement", "ssw", "--concentration", "10nM", "--fuel",
            "100nM", "--runs", "4", "--until", str(UNTIL), "--seed", "5", "--workers", "1",
            "--json"]
    for extra in ([], ["--every", "10"]):
        assert main([*args, *extra]) == 0
        obj = json.loads(capsys.readouterr().out)
        assert obj["fuel"] == pytest.approx(LEFT, abs=1e-12)
