"""Library entry points the commands call: cell networks from a model, the physical deadline,
the ensemble's own summary, the regime map's resume policy and the one figure saver."""

import json
import math
import pickle

import pytest
from click.testing import CliRunner

from crn.analyses.cells import cell_networks
from crn.analyses.copies import parallel_deadline
from crn.analyses.probes import InitialSplit, ModelParameters
from crn.cli import cli
from crn.core.errors import CRNError
from crn.core.model import parse_model
from crn.core.units import concentration_for, to_parallel_time
from crn.io.models import load_model
from crn.solvers.simulate import simulate

AM = "models/approximate_majority.toml"


# cell networks ---------------------------------------------------------------------------------

def test_cells_of_a_toml_model_reparse_its_text_with_the_other_overrides():
    text = """
name = "leaders"
[parameters]
n = 10
gap = 2
spare = "n // 5"
[initial]
X = "(n + gap) / 2"
Y = "(n - gap) / 2"
L = "spare"
[protocol]
transitions = ["X, Y -> L, L", "L, X -> X, X"]
[output]
X = "X"
Y = "Y"
[question]
majority = ["X", "Y"]
"""
    model = parse_model(text, overrides={"gap": 4})
    cells = cell_networks(model)
    assert isinstance(cells, ModelParameters) and cells.overrides == ()
    net = cells(100, 20)
    # derived: X, Y = (100 +- 20) / 2 and the count derived from n follows: 100 // 5
    assert dict(zip(net.species, net.initial.tolist(), strict=True)) == {
        "X": 60, "Y": 40, "L": 20}
    fixed = cell_networks(parse_model(text, overrides={"spare": 3, "n": 50}))
    assert fixed.overrides == (("spare", 3),)  # n and gap are the cell's; other overrides stay
    assert fixed(100, 20).initial[fixed(100, 20).index["L"]] == 3
    assert pickle.loads(pickle.dumps(cells))(100, 20).initial.tolist() == net.initial.tolist()


def test_cells_of_a_python_model_split_the_inputs():
    model = load_model("models/cancel_split_majority.py")
    cells = cell_networks(model)
    assert isinstance(cells, InitialSplit)
    a, b = model.network.inputs
    net = cells(100, 20)
    assert (net.initial[a], net.initial[b]) == (60, 40)


def test_cells_need_a_majority_question():
    with pytest.raises(CRNError, match="majority"):
        cell_networks(load_model("models/epidemic.toml"))


# physical deadline ---------------------------------------------------------------------------

def test_a_deadline_in_seconds_becomes_parallel_time():
    # derived: one unit of parallel time is 1 / (k C) = 1 / (1e6 /M/s * 10 nM) = 100 s
    assert parallel_deadline(7200.0, 1e6, concentration_molar=1e-8) == pytest.approx(72.0)
    per_n = parallel_deadline(7200.0, 1e6, volume_liters=1e-12)
    for n in (10, 1000, 10**6):
        assert per_n(n) == to_parallel_time(7200.0, 1e6, concentration_for(n, 1e-12))
    assert pickle.loads(pickle.dumps(per_n))(1000) == per_n(1000)  # for worker processes
    with pytest.raises(CRNError, match="exactly one"):
        parallel_deadline(60.0, 1e6)
    with pytest.raises(CRNError, match="exactly one"):
        parallel_deadline(60.0, 1e6, concentration_molar=1e-8, volume_liters=1e-12)


# the ensemble's own summary -------------------------------------------------------------------

def _wilson(k, n, z=1.959963984540054):
    """Wilson, J. Amer. Statist. Assoc. 22:209-212, 1927 (score interval), written out."""
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return p, centre - half, centre + half


def test_outcome_intervals_are_wilson_intervals_in_text_and_json():
    net = load_model(AM, {"n": 80, "gap": 4}).network
    ensemble = simulate(net, runs=24, until=60.0, rng=5, workers=1)
    intervals = ensemble.outcome_intervals()
    assert list(intervals) == list(ensemble.outcomes())  # every label and "none"
    for label, row in intervals.items():
        k = ensemble.outcomes()[label]
        assert row["runs"] == k
        assert (row["p"], row["low"], row["high"]) == pytest.approx(_wilson(k, 24), abs=1e-12)
    summary = ensemble.summary()
    assert summary["outcome_intervals"] == intervals and summary["runs"] == 24
    args = ["ssa", AM, "--set", "n=80", "--set", "gap=4", "--runs", "24", "--seed", "5",
            "--workers", "1", "--until", "60"]
    data = json.loads(CliRunner().invoke(cli, [*args, "--json"]).stdout)
    assert data["outcome_intervals"] == intervals  # JSON keeps every digit of a float
    text = CliRunner().invoke(cli, args).stdout
    for label, row in intervals.items():
        if row["runs"]:
            assert f"[{row['low']:.4f}, {row['high']:.4f}]" in text, label


def test_no_runs_give_the_whole_interval():
    from crn.solvers.simulate import Ensemble

    empty = Ensemble.from_trajectories([], engine="direct", seed_entropy=1, until=1.0,
                                       species=("X", "Y", "B"), times=[0.0, 1.0],
                                       requested=5, outcome_labels=("X", "Y"))
    assert list(empty.outcome_intervals()) == ["X", "Y", "none"]
    assert all(math.isnan(r["p"]) and (r["low"], r["high"]) == (0.0, 1.0)
               for r in empty.outcome_intervals().values())


# the regime map's resume policy ---------------------------------------------------------------

def test_a_resumed_sweep_adopts_the_file_seed_and_its_cells(tmp_path):
    from crn.analyses.regimes import RegimeCell
    from crn.io.regime_store import open_regime_sweep, regime_sweep_parameters

    model = load_model(AM)
    params = regime_sweep_parameters(model, sets=(), n=[20], gap=[2], risk=0.01,
                                     runs_max=10, time_factor=2.0, method="auto")
    assert len(params["model_sha256"]) == 64 and params["model"] == "approximate_majority.toml"
    assert open_regime_sweep(None, params, seed=17).seed_entropy == 17
    assert open_regime_sweep(None, params).path is None
    first = open_regime_sweep(tmp_path, params, seed=None)
    cell = RegimeCell.from_dict(
        {"n": 20, "gap": 2, "ode_label": "X", "ode_time": 5.0, "p_wrong": 0.1, "low": 0.0,
         "high": 0.3, "wrong": 1, "runs": 10, "flag": "uncertain", "time_flag": "ok",
         "ssa_median_time": 6.0, "method": "stochastic", "horizon": 50.0,
         "correct_label": "X"})
    first.record(cell)
    again = open_regime_sweep(tmp_path, params, seed=None, resume=True)
    assert again.seed_entropy == first.seed_entropy
    assert list(again.done) == [(20, 2)] and again.finished() == [cell]
    with pytest.raises(CRNError, match="another seed"):
        open_regime_sweep(tmp_path, params, seed=first.seed_entropy + 1, resume=True)
    other = dict(params, risk=0.05)
    with pytest.raises(CRNError, match="other parameters"):
        open_regime_sweep(tmp_path, other, resume=True)


# one figure saver -----------------------------------------------------------------------------

@pytest.mark.parametrize("name, magic", [("f.png", b"\x89PNG"), ("f.pdf", b"%PDF"),
                                         ("f.svg", b"<?xml"), ("noext", b"\x89PNG")])
def test_save_figure_writes_the_suffix_format_atomically_and_closes(tmp_path, name, magic):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.plots.save import save_figure

    figure, ax = plt.subplots()
    ax.plot([0, 1], [0, 1])
    save_figure(figure, tmp_path / name)
    assert (tmp_path / name).read_bytes().startswith(magic)
    assert [p.name for p in tmp_path.iterdir()] == [name]  # no temporary file left
    assert not plt.fignum_exists(figure.number)


def test_save_figure_to_a_buffer_and_into_a_missing_folder(tmp_path):
    import io

    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.plots.save import save_figure

    figure = plt.figure()
    with pytest.raises(ValueError, match="format"):
        save_figure(figure, io.BytesIO(), close=False)
    buffer = io.BytesIO()
    save_figure(figure, buffer, format="svg", dpi=None, metadata={"Date": None})
    assert b"<svg" in buffer.getvalue()[:400] and b"<dc:date>" not in buffer.getvalue()
    figure = plt.figure()
    with pytest.raises(CRNError, match="cannot write"):
        save_figure(figure, tmp_path / "missing" / "f.png")
    assert not plt.fignum_exists(figure.number)  # closed on failure too
