"""What a new user trips on: bad options caught before any work, complete tables, one wording."""

import importlib
import json
import re
import time

import numpy as np
import pytest
from click.testing import CliRunner

from crn.cli import cli, main

AM = "models/approximate_majority.toml"
EXACT_MAJORITY = "models/exact_majority.toml"
SEED_NOTICE = re.compile(r"^crn: seed (\d+) \(pass --seed \1 to repeat\)$", re.M)


def invoke(args, code=0):
    result = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert result.exit_code == code, result.output
    return result


def one_line_error(argv, capsys, code=2):
    assert main(argv) == code
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    return lines[0]


def _no_work(*args, **kwargs):
    raise AssertionError("the command started its work before checking its options")


def block(monkeypatch, target):
    """Make ``module.function`` fail if called. Commands import the library inside their
    bodies (light start-up), so the library function is patched where it lives."""
    module, name = target.rsplit(".", 1)
    monkeypatch.setattr(importlib.import_module(module), name, _no_work)


# --plot: the extension is checked before any work ---------------------------------------------

@pytest.mark.parametrize("command, target, extra", [
    ("ode", "crn.solvers.ode.solve_mean_field", []),
    ("compare", "crn.commands.compare.run_ensemble", ["--runs", "2"]),
    ("regimes", "crn.analyses.regimes.regime_map", ["--n", "20", "--gaps", "2"]),
    ("ssa", "crn.commands.ssa.run_ensemble", ["--runs", "2"]),
])
@pytest.mark.parametrize("name", ["ode.txt", "c.jpgx", "r.foo"])
def test_an_unsupported_figure_extension_fails_before_any_work(tmp_path, capsys, monkeypatch,
                                                               command, target, extra, name):
    block(monkeypatch, target)
    line = one_line_error([command, AM, *extra, "--plot", str(tmp_path / name)], capsys)
    suffix = name.rsplit(".", 1)[1]
    assert "--plot" in line and f"as .{suffix}" in line
    assert "png, pdf, svg" in line  # the accepted list
    assert not (tmp_path / name).exists()


def test_every_accepted_figure_format_is_one_matplotlib_writes(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.commands.options import FIGURE_FORMATS

    figure = plt.figure()
    try:
        supported = figure.canvas.get_supported_filetypes()
    finally:
        plt.close(figure)
    assert set(FIGURE_FORMATS) <= set(supported)
    svg = tmp_path / "am.svg"
    invoke(["ode", AM, "--set", "n=100", "--plot", str(svg)])
    assert b"<svg" in svg.read_bytes()[:400]


# --cluster: the address is checked before any work --------------------------------------------

@pytest.mark.parametrize("command, extra", [("ssa", ["--runs", "2"]),
                                            ("compare", ["--runs", "2"]),
                                            ("regimes", ["--n", "20", "--gaps", "2"])])
@pytest.mark.parametrize("address, says", [
    ("notanaddress", "not a scheduler address"),
    ("tcp://:8786", "not a scheduler address"),
    ("tcp://127.0.0.1:99999", "not a scheduler address"),
    ("tcp://127.0.0.1:1", "cannot reach the Dask scheduler"),  # nothing listens on port 1
])
def test_a_bad_cluster_address_is_one_line_at_once(capsys, monkeypatch, command, extra,
                                                   address, says):
    for target in ("crn.solvers.simulate.simulate", "crn.commands.compare.run_ensemble",
                   "crn.analyses.regimes.regime_map"):
        block(monkeypatch, target)
    start = time.monotonic()
    line = one_line_error([command, AM, *extra, "--cluster", address], capsys)
    assert "--cluster" in line and says in line
    # a refused or malformed address answers at once; the probe's own timeout is 5 s
    assert time.monotonic() - start < 5


def test_the_library_refuses_a_malformed_address_too():
    from crn.core.errors import CRNError
    from crn.solvers.simulate import probe_scheduler

    with pytest.raises(CRNError, match="not a scheduler address"):
        probe_scheduler("notanaddress")


# crn ode --at: every requested time in the text ----------------------------------------------

def test_ode_text_shows_every_requested_time():
    args = ["ode", AM, "--set", "n=1000", "--set", "gap=10", "--at", "5,10,2.5"]
    data = json.loads(invoke([*args, "--json"]).stdout)
    text = invoke(args).stdout
    rows = {}
    for line in text.splitlines():
        parts = line.split()
        if len(parts) == 4 and re.fullmatch(r"[\d.e+-]+", parts[0]) and parts[0] != "-":
            rows[float(parts[0])] = [float(v) for v in parts[1:]]
    assert sorted(rows) == [2.5, 5.0, 10.0] == data["times"]
    for i, t in enumerate(data["times"]):
        expected = [data["fractions"][s][i] for s in ("X", "Y", "B")]
        assert rows[t] == pytest.approx(expected, rel=1e-5)  # printed to 6 significant digits


# roundoff below zero is clipped ----------------------------------------------------------------

@pytest.mark.parametrize("model", [AM, "models/cancel_spread.toml", "models/undecided_state.toml",
                                   "models/droplet_assay.toml", "models/epidemic.toml"])
def test_no_output_fraction_is_negative(model):
    # these solves printed fractions such as -6.4e-17 and fixed points with -4.3e-16
    args = ["ode", model, "--at", "1,50"]
    data = json.loads(invoke([*args, "--json"]).stdout)
    assert min(min(v) for v in data["fractions"].values()) >= 0
    for point in data["fixed_points"]:
        assert all(v is None or v >= 0 for v in point["point"].values())
    assert not re.search(r"(?<![e\d])-\d", invoke(args).stdout.split("fixed points")[0])


def test_clipping_leaves_a_real_undershoot_visible():
    from crn.solvers.ode import _clip_roundoff

    values = np.array([[0.5, -1e-17, 0.5], [0.7, -0.2, -0.0]])
    clipped = _clip_roundoff(values, rtol=1e-10, atol=1e-12)
    assert clipped[0, 1] == 0.0 and clipped[1, 1] == -0.2  # -0.2 is a failure, not roundoff
    assert not np.signbit(clipped[0, 1]) and not np.signbit(clipped[1, 2])  # never "-0"


# a continuum of fixed points in words -----------------------------------------------------------

FLAT = """name = "flat"
[initial]
X = 6
Y = 4
[network]
volume = 10
reactions = [{ reaction = "X + Y -> 2 X", rate = 0 }]
[output]
X = "X"
Y = "Y"
"""


@pytest.mark.filterwarnings("ignore:.*has rate 0 and never fires")
def test_a_continuum_of_fixed_points_is_described_in_words(tmp_path):
    path = tmp_path / "flat.toml"
    path.write_text(FLAT)
    text = invoke(["ode", str(path)]).stdout
    line = text.strip().splitlines()[-1]
    # derived: with rate 0 nothing moves; X + Y = 1 is conserved, so every X = 1 - Y is fixed
    assert line.strip().startswith("X=1 - Y: a continuum of fixed points, one for every value "
                                   "of Y"), line
    assert "non-isolated" not in text and "eigenvalues -" not in text
    point = json.loads(invoke(["ode", str(path), "--json"]).stdout)["fixed_points"][0]
    assert point["classification"] == "non-isolated" and point["free"] == ["Y"]


# every label of the question, with 0 ----------------------------------------------------------

def test_outcome_tables_and_json_list_labels_no_run_got():
    # exact majority never decides for the minority: B gets no run (Mertzios et al., ICALP 2014)
    args = [EXACT_MAJORITY, "--set", "n=20", "--set", "gap=4", "--runs", "6", "--seed", "3",
            "--workers", "1"]
    data = json.loads(invoke(["ssa", *args, "--json"]).stdout)
    assert data["outcomes"] == {"A": 6, "B": 0, "none": 0}
    text = invoke(["ssa", *args]).stdout
    assert re.search(r"^B\s+0\s+0\.0000", text, re.M) and re.search(r"^none\s+0\s", text, re.M)
    compared = json.loads(invoke(["compare", *args, "--json"]).stdout)
    assert compared["ssa"]["outcomes"] == {"A": 6, "B": 0, "none": 0}
    assert re.search(r"^B\s+0\s+0\.0000", invoke(["compare", *args]).stdout, re.M)


# crn verify exits 1 on a counterexample --------------------------------------------------------

def test_verify_exit_status_says_whether_the_protocol_is_refuted():
    refuted = invoke(["verify", "models/cancel_spread.toml", "--n-max", "5", "--json"], code=1)
    assert json.loads(refuted.stdout)["correct"] is False
    assert "NOT correct" in invoke(["verify", "models/cancel_spread.toml", "--n-max", "5"],
                                   code=1).stdout
    assert json.loads(invoke(["verify", EXACT_MAJORITY, "--n-max", "4", "--json"]).stdout
                      )["correct"] is True
    assert "1 on a counterexample" in " ".join(invoke(["verify", "--help"]).stdout.split())


# states a rule names but nothing declares -----------------------------------------------------

TYPO = """name = "typo"
[initial]
X = 6
Y = 4
[protocol]
transitions = [
  "X, Y -> X, B",
  "Y, X -> Y, B",
  "X, Bb -> X, X",
  "Y, B -> Y, Yy",
  "Y, Bb -> Y, Y",
]
[output]
X = "X"
Y = "Y"
"""


def test_undeclared_and_dead_end_states_are_one_warning_each(tmp_path, capsys):
    path = tmp_path / "typo.toml"
    path.write_text(TYPO)
    assert main(["translate", str(path)]) == 0
    err = capsys.readouterr().err.splitlines()
    assert err == [
        f"crn: warning: {path}:9 [protocol.transitions[2]]: rule 'X, Bb -> X, X' names state "
        "'Bb', which has no initial count and no output label and which no rule makes: it is "
        "never present (a typo?)",
        f"crn: warning: {path}:10 [protocol.transitions[3]]: rule 'Y, B -> Y, Yy' makes state "
        "'Yy', which has no output label and which no rule changes: once made it stays, and no "
        "consensus is possible",
    ]


def test_a_reaction_naming_a_species_nothing_makes_is_warned_about():
    from crn.core.model import ModelWarning, parse_model

    text = ('name = "n"\n[initial]\nX = 2\n[network]\n'
            'reactions = [{ reaction = "X + Z -> 0", rate = 1 }, { reaction = "X -> W", '
            'rate = 1 }]\n')
    with pytest.warns(ModelWarning, match=r"n.toml:5 .*'Z', which has no initial") as caught:
        parse_model(text, source="n.toml")
    assert len(caught) == 1  # the waste W of a network is no mistake


@pytest.mark.parametrize("model", ["approximate_majority", "droplet_assay", "exact_majority",
                                   "undecided_state", "cancel_spread", "voter", "epidemic",
                                   "birth_death"])
def test_shipped_models_load_without_warnings(model, recwarn):
    from crn.core.model import ModelWarning
    from crn.io.models import load_model

    load_model(f"models/{model}.toml")
    assert not [w for w in recwarn if issubclass(w.category, ModelWarning)]


# one wording each ------------------------------------------------------------------------------

def test_copies_help_speaks_of_what_copies_has():
    text = " ".join(invoke(["copies", "--help"]).stdout.split())
    seed = text[text.index("--seed"):]
    seed = seed[:seed.index("--json")]
    assert "worker" not in seed and "Printed when not given" in seed
    method = text[text.index("--method"):]
    assert "Exact analysis, stochastic runs, or exact when small" in method[:200]


def test_copies_errors_do_not_speak_of_a_sweep(capsys):
    line = one_line_error(["copies", "models/epidemic.toml", "--gap", "2"], capsys)
    assert "sweep" not in line and "two input states" in line


def test_gap_fraction_range_is_the_same_in_copies_and_regimes(capsys):
    from_copies = one_line_error(["copies", AM, "--gap-fraction", "1"], capsys)
    from_regimes = one_line_error(["regimes", AM, "--n", "20", "--gap-fractions", "1"], capsys)
    assert from_copies == from_regimes.replace("--gap-fractions", "--gap-fraction") == (
        "crn: --gap-fraction must lie in (0, 1), strictly between a tie and no minority, "
        "got 1.0")
    assert from_regimes.startswith("crn: --gap-fractions must lie in (0, 1)")


def test_set_with_a_value_that_is_not_a_number(capsys):
    line = one_line_error(["check", AM, "--set", "n=abc"], capsys)
    assert line == "crn: [--set]: 'abc' is not a number for parameter n"


def test_the_seed_notice_is_worded_one_way(capsys):
    notices = []
    for argv in (["ssa", "models/voter.toml", "--set", "n=10", "--set", "gap=2", "--runs", "2",
                  "--workers", "1"],
                 ["ssa", "models/voter.toml", "--set", "n=10", "--set", "gap=2", "--runs", "2",
                  "--workers", "1", "--every", "1", "--until", "4"],
                 ["regimes", "models/voter.toml", "--n", "10", "--gaps", "2", "--method", "exact"],
                 ["copies", "models/voter.toml", "--gap", "2", "--risk", "0.3", "--method",
                  "exact", "--n-max", "20"]):
        assert main(argv) == 0
        notices.append(SEED_NOTICE.findall(capsys.readouterr().err))
    assert all(len(found) == 1 for found in notices), notices


# time axes and units -----------------------------------------------------------------------

def test_ode_and_compare_figures_label_parallel_time_with_minutes_on_top(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.io.models import load_model
    from crn.plots.compare import plot_compare
    from crn.plots.ode import plot_mean_field
    from crn.solvers.ode import solve_mean_field
    from crn.solvers.simulate import simulate

    net = load_model(AM, {"n": 60, "gap": 6}).network
    result = solve_mean_field(net, times=np.linspace(0, 10, 21))
    runs = simulate(net, runs=3, until=10, times=np.linspace(0, 10, 21), rng=1, workers=1)
    for ax in (plot_mean_field(result, seconds_per_time=100.0),
               plot_compare(result, runs, seconds_per_time=100.0)):
        try:
            assert ax.get_xlabel() == "parallel time (interactions / n)"
            (top,) = ax.child_axes
            assert top.get_xlabel().startswith("minutes")
            # 1 unit of parallel time is 100 s: 6 units are 10 minutes on the top axis
            ax.set_xlim(0, 6)
            ax.figure.canvas.draw()
            assert top.get_xlim() == pytest.approx((0, 10))
        finally:
            plt.close(ax.figure)
    plain = plot_mean_field(result)
    assert not plain.child_axes
    plt.close(plain.figure)


def test_rate_and_concentration_give_the_time_unit(tmp_path, capsys):
    from crn.commands.options import seconds_per_time
    from crn.io.models import load_model

    net = load_model(AM).network
    # docs/design.md physical units: one unit of parallel time lasts 1 / (k C) = 1 / (1e6 * 1e-8) s
    assert seconds_per_time(net, "1e6/M/s", "10nM") == pytest.approx(100.0)
    assert seconds_per_time(net, None, None) is None
    svg = tmp_path / "am.svg"
    invoke(["ode", AM, "--set", "n=100", "--rate", "1e6/M/s", "--concentration", "10nM",
            "--plot", str(svg)])
    assert b"minutes" in svg.read_bytes()
    line = one_line_error(["ode", AM, "--rate", "1e6/M/s"], capsys)
    assert "--rate and --concentration together" in line


def test_ssa_prints_the_horizon_with_its_unit():
    text = invoke(["ssa", AM, "--set", "n=40", "--set", "gap=4", "--runs", "2", "--seed", "1",
                   "--until", "30", "--workers", "1"]).stdout
    assert "horizon 30 parallel time" in text.splitlines()[0]
    text = invoke(["ssa", "models/birth_death.toml", "--runs", "2", "--seed", "1",
                   "--until", "3", "--workers", "1"]).stdout
    assert "horizon 3 time units" in text.splitlines()[0]


# progress with an ETA --------------------------------------------------------------------------

def test_the_progress_bar_shows_the_time_remaining(monkeypatch):
    import rich.progress

    from crn.commands.options import progress_bar

    built = []
    original = rich.progress.Progress.__init__

    def record(self, *columns, **kwargs):
        built.append(columns)
        original(self, *columns, **kwargs)

    monkeypatch.setattr(rich.progress.Progress, "__init__", record)
    monkeypatch.setenv("CRN_PROGRESS", "1")
    with progress_bar("runs", 10) as update:
        update(5)
    assert any(isinstance(c, rich.progress.TimeRemainingColumn) for c in built[0])
    built.clear()
    with progress_bar("runs", 10, enabled=False) as update:  # --json: no bar at all
        update(5)
    assert built == []


def test_lab_time_options_never_duplicate_a_commands_own_rate():
    import click

    from crn.commands.options import dna_options, lab_time_options

    @click.command()
    @lab_time_options
    @dna_options
    def command(rate, concentration, fuel, max_rate, toehold, leak):
        click.echo(f"{rate} {concentration}")

    names = [p.name for p in command.params]
    assert names.count("rate") == 1 and names.count("concentration") == 1
    result = CliRunner().invoke(command, ["--rate", "1e6/M/s", "--concentration", "10nM"])
    assert result.output == "1e6/M/s 10nM\n"
