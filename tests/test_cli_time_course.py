"""``crn ssa --every`` and ``crn ode --every`` through the command line."""

import csv
import json

import numpy as np
import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.io.models import load_model
from crn.solvers.simulate import simulate
from crn.solvers.time_course import TimeCourseAccumulator, sample_times

BD = "models/birth_death.toml"  # immigration-death network, no labels
AM = "models/approximate_majority.toml"


def invoke(args):
    result = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result


def test_ssa_every_json_is_the_library_reduction():
    out = json.loads(invoke(["ssa", BD, "--runs", "40", "--seed", "3", "--until", "2",
                             "--every", "0.5", "--workers", "1", "--json"]).stdout)
    course = out["time_course"]
    assert course["times"] == [0.0, 0.5, 1.0, 1.5, 2.0]
    assert set(course) >= {"times", "mean", "sd", "q05", "q95"}
    assert course["runs"] == 40 and course["units"] == "count"
    net = load_model(BD).network
    times = sample_times(0.5, 2.0)
    acc = TimeCourseAccumulator(times, net.species, 40, rng=np.random.SeedSequence(3))
    simulate(net, runs=40, until=2.0, times=times, rng=np.random.SeedSequence(3), workers=1,
             reduce=acc)
    expected = acc.result()
    for name in ("mean", "sd", "q05", "q95"):
        assert course[name]["X"] == getattr(expected, name)[:, 0].tolist()
    assert course["sd"]["X"][0] == 0.0 and course["mean"]["X"][0] == 0.0
    assert out["at_horizon"]["mean"]["X"] == course["mean"]["X"][-1]


def test_ssa_every_same_numbers_on_two_workers():
    args = ["ssa", BD, "--runs", "30", "--seed", "9", "--until", "1", "--every", "0.25", "--json"]
    one = json.loads(invoke([*args, "--workers", "1"]).stdout)["time_course"]
    two = json.loads(invoke([*args, "--workers", "2"]).stdout)["time_course"]
    assert one == two


def test_network_without_labels_shows_species_at_the_horizon_not_outcomes():
    text = invoke(["ssa", BD, "--runs", "30", "--seed", "1", "--until", "3",
                   "--workers", "1"]).stdout
    assert "species at t = 3 (counts over 30 runs)" in text
    assert "none" not in text and "probability" not in text
    row = next(line for line in text.splitlines() if line.strip().startswith("X "))
    assert len(row.split()) == 5  # species, mean, sd, 5%, 95%
    out = json.loads(invoke(["ssa", BD, "--runs", "30", "--seed", "1", "--until", "3",
                             "--workers", "1", "--json"]).stdout)
    assert set(out["at_horizon"]) == {"time", "mean", "sd", "q05", "q95"}
    assert "time_course" not in out


def test_protocol_keeps_its_outcome_table_and_adds_the_horizon_with_every():
    text = invoke(["ssa", AM, "--set", "n=60", "--set", "gap=4", "--runs", "10", "--seed", "2",
                   "--workers", "1", "--every", "1", "--until", "5"]).stdout
    assert "probability" in text and "species at t = 5" in text


def test_ssa_every_csv_and_plot(tmp_path):
    csv_path, png = tmp_path / "tc.csv", tmp_path / "tc.png"
    invoke(["ssa", BD, "--runs", "20", "--seed", "4", "--until", "1", "--every", "0.5",
            "--workers", "1", "--csv", str(csv_path), "--plot", str(png)])
    rows = list(csv.reader(csv_path.open()))
    assert rows[0] == ["time", "species", "mean", "sd", "q05", "q95"]
    assert [r[:2] for r in rows[1:]] == [["0.0", "X"], ["0.5", "X"], ["1.0", "X"]]
    assert png.stat().st_size > 1000


def test_ode_every_same_shape_in_counts_and_concentrations(tmp_path):
    base = ["ode", BD, "--until", "2", "--every", "0.5", "--json", "--no-fixed-points"]
    conc = json.loads(invoke(base).stdout)["time_course"]
    counts = json.loads(invoke([*base, "--counts"]).stdout)["time_course"]
    assert conc["times"] == [0.0, 0.5, 1.0, 1.5, 2.0]
    assert "sd" not in conc and conc["units"] == "concentration" and counts["units"] == "count"
    # derived: dx/dt = birth - death x from 0 (birth 10, death 1, volume 1)
    np.testing.assert_allclose(counts["mean"]["X"], 10 * (1 - np.exp(-np.array(conc["times"]))),
                               rtol=1e-7)
    csv_path = tmp_path / "ode.csv"
    invoke(["ode", BD, "--until", "1", "--every", "0.5", "--csv", str(csv_path),
            "--no-fixed-points"])
    rows = list(csv.reader(csv_path.open()))
    assert rows[0] == ["time", "species", "mean", "sd", "q05", "q95"]
    assert rows[1][3:] == ["", "", ""]


@pytest.mark.parametrize("command", ["ssa", "ode"])
@pytest.mark.parametrize("args, message", [
    (["--until", "2", "--every", "3"], "longer than the horizon"),
    (["--until", "2", "--every", "0"], "must be positive"),
    (["--until", "2", "--every", "-0.5"], "must be positive"),
    (["--until", "1", "--every", "1e-7"], "more than the limit 1000000; pass --force"),
])
def test_bad_every_exits_2_with_one_line(command, args, message, capsys):
    assert main([command, BD, *args]) == 2
    err = capsys.readouterr().err
    assert message in err and "--every" in err and err.count("\n") == 1


def test_ode_counts_needs_every_and_at_excludes_it(capsys):
    assert main(["ode", BD, "--counts"]) == 2
    assert main(["ode", BD, "--every", "1", "--at", "1,2"]) == 2
    err = capsys.readouterr().err
    assert "--counts" in err and "either --at or --every" in err


def test_interrupted_time_course_reports_the_finished_runs(monkeypatch, capsys):
    import dataclasses
    import importlib

    from crn.solvers.simulate import SimulationInterrupted

    module = importlib.import_module("crn.solvers.simulate")  # the command imports it when it runs
    real = module.simulate

    def interrupted(net, **kw):  # two runs finish (and reach the reduction), then Ctrl-C
        part = real(net, **{**kw, "runs": 2})
        raise SimulationInterrupted(dataclasses.replace(part, requested=kw["runs"]))

    monkeypatch.setattr(module, "simulate", interrupted)
    code = main(["ssa", BD, "--runs", "5", "--seed", "1", "--workers", "1", "--until", "1",
                 "--every", "0.5", "--json"])
    assert code == 130
    data = json.loads(capsys.readouterr().out)
    assert data["interrupted"] is True and data["time_course"]["runs"] == 2


SOURCE_SINK = """<?xml version="1.0" encoding="UTF-8"?>
<sbml xmlns="http://www.sbml.org/sbml/level3/version2/core" level="3" version="2">
  <model id="reporter">
    <listOfCompartments><compartment id="droplet" constant="true"/></listOfCompartments>
    <listOfSpecies>
      <species id="G" compartment="droplet" initialAmount="2" hasOnlySubstanceUnits="true"
               boundaryCondition="true" constant="false"/>
      <species id="R" compartment="droplet" initialAmount="0" hasOnlySubstanceUnits="true"
               boundaryCondition="false" constant="false"/>
    </listOfSpecies>
    <listOfParameters>
      <parameter id="make" value="3" constant="true"/>
      <parameter id="decay" value="0.5" constant="true"/>
    </listOfParameters>
    <listOfReactions>
      <reaction id="transcribe" reversible="false">
        <listOfReactants><speciesReference species="G" stoichiometry="1" constant="true"/>
        </listOfReactants>
        <listOfProducts><speciesReference species="R" stoichiometry="1" constant="true"/>
        </listOfProducts>
        <kineticLaw><math xmlns="http://www.w3.org/1998/Math/MathML">
          <apply><times/><ci>make</ci><ci>G</ci></apply></math></kineticLaw>
      </reaction>
      <reaction id="degrade" reversible="false">
        <listOfReactants><speciesReference species="R" stoichiometry="1" constant="true"/>
        </listOfReactants>
        <kineticLaw><math xmlns="http://www.w3.org/1998/Math/MathML">
          <apply><times/><ci>decay</ci><ci>R</ci></apply></math></kineticLaw>
      </reaction>
    </listOfReactions>
  </model>
</sbml>
"""


def test_sbml_source_and_sink_model_gives_species_at_the_horizon(tmp_path):
    # a template G (boundary, held at 2) is transcribed into R at 3 G, R decays at 0.5 R: from
    # zero, R(t) is Poisson with mean (6 / 0.5)(1 - e^{-0.5 t}) (derived: immigration-death)
    path = tmp_path / "reporter.xml"
    path.write_text(SOURCE_SINK)
    out = json.loads(invoke(["ssa", str(path), "--runs", "2000", "--seed", "12", "--until", "4",
                             "--workers", "1", "--json"]).stdout)
    at = out["at_horizon"]
    assert at["time"] == 4.0 and at["mean"]["G"] == 2.0 and at["sd"]["G"] == 0.0
    mu = 12 * (1 - np.exp(-2.0))
    # Z within 4 standard errors (99.99%, normal approximation) for the mean of 2000 draws
    assert abs(at["mean"]["R"] - mu) < 4 * np.sqrt(mu / 2000)
    assert "outcomes" in out and "time_course" not in out
