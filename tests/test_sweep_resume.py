"""Nothing lost: results appended per cell, resume after a kill, whole-or-nothing files."""

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.core.errors import CRNError
from crn.io.atomic import atomic_path, write_atomic
from crn.io.sweep_store import SweepStore

ROOT = Path(__file__).resolve().parent.parent
AM = str(ROOT / "models" / "approximate_majority.toml")
ARGS = ["regimes", AM, "--n", "200,400,800", "--gaps", "10,20,40", "--runs-max", "200",
        "--method", "stochastic", "--seed", "9"]


def _lines(path: Path) -> list[str]:
    return [line for line in path.read_text().split("\n") if line]


def test_kill_then_resume_gives_the_uninterrupted_table(tmp_path):
    runner = CliRunner()
    whole = tmp_path / "whole"
    done = runner.invoke(cli, ARGS + ["--out", str(whole), "--json"])
    assert done.exit_code == 0, done.output
    expected = json.loads(done.output)
    assert len(expected["cells"]) == 9
    assert len(_lines(whole / "regimes.jsonl")) == 1 + 9

    broken = tmp_path / "broken"
    env = dict(os.environ, CRN_TEST_KILL_AFTER_CELLS="4")
    entry = "import sys; from crn.cli import main; sys.exit(main(sys.argv[1:]))"
    proc = subprocess.run([sys.executable, "-c", entry, *ARGS, "--out", str(broken)],
                          env=env, cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == -signal.SIGKILL, proc.stderr
    lines = _lines(broken / "regimes.jsonl")
    assert len(lines) == 1 + 4  # the header and the four cells finished before the kill
    header = json.loads(lines[0])
    assert header["seed_entropy"] == 9
    assert header["parameters"]["runs_max"] == 200
    assert not (broken / "regimes.csv").exists()  # final tables are written only at the end
    # a torn last line, as a kill in the middle of a write would leave, is dropped on resume
    with open(broken / "regimes.jsonl", "a") as fh:
        fh.write('{"kind": "cell", "cell": {"n": 8')

    resumed = runner.invoke(cli, ARGS + ["--out", str(broken), "--resume", "--json"])
    assert resumed.exit_code == 0, resumed.output
    assert json.loads(resumed.output) == expected
    assert (broken / "regimes.csv").read_bytes() == (whole / "regimes.csv").read_bytes()
    assert len(_lines(broken / "regimes.jsonl")) == 1 + 9


def test_resume_refuses_other_parameters(tmp_path, capsys):
    out = tmp_path / "o"
    args = ["regimes", AM, "--n", "100", "--gaps", "10", "--runs-max", "50", "--method",
            "stochastic", "--seed", "1", "--out", str(out), "--json"]
    assert main(args) == 0
    capsys.readouterr()
    changed = [a if a != "50" else "60" for a in args] + ["--resume"]
    assert main(changed) == 2
    assert "runs_max" in capsys.readouterr().err
    assert main([a if a != "1" else "2" for a in args] + ["--resume"]) == 2


def test_store_round_trip_and_seed_adoption(tmp_path):
    store = SweepStore(tmp_path, "s", {"a": 1}, seed_entropy=123)
    store.append({"n": 1, "x": float("nan")})
    again = SweepStore(tmp_path, "s", {"a": 1}, seed_entropy=999, resume=True)
    assert again.seed_entropy == 123  # no explicit seed: the file's entropy is adopted
    assert again.finished == [{"n": 1, "x": None}]
    with pytest.raises(CRNError, match="another seed"):
        SweepStore(tmp_path, "s", {"a": 1}, seed_entropy=999, resume=True, check_seed=True)


def test_atomic_write_is_whole_or_nothing(tmp_path):
    target = tmp_path / "table.csv"
    write_atomic(target, "old\n")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("killed mid-write")
    assert target.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["table.csv"]
    write_atomic(target, b"new\n")
    assert target.read_bytes() == b"new\n"


def test_resume_refuses_a_results_file_with_a_foreign_record(tmp_path):
    store = SweepStore(tmp_path, "regimes", {"n": [10]}, 1234)
    store.append({"n": 10, "gap": 2})
    with open(store.path, "a", encoding="utf-8") as fh:
        fh.write("[1]\n")
    with pytest.raises(CRNError, match=r"regimes.jsonl:3: not a results record"):
        SweepStore(tmp_path, "regimes", {"n": [10]}, 1234, resume=True)


def test_an_output_folder_that_cannot_be_made_is_a_crn_error(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(CRNError, match="cannot create the folder"):
        SweepStore(blocker / "sub", "regimes", {}, 1)


def test_resume_refuses_a_switch_between_reduced_and_full_implementation(tmp_path):
    # a map whose stochastic cells ran on the reduced model must not be completed on the
    # full network (or the other way round): the switch is a recorded parameter
    from crn.core.model import parse_model
    from crn.dna import DnaParameters
    from crn.io.regime_store import regime_sweep_parameters

    model = parse_model(Path(AM).read_text(), source=AM)
    common = dict(n=[100], gap=[10], risk=0.01, runs_max=50, time_factor=2.0,
                  method="stochastic",
                  implementation=("ssw", DnaParameters(rate=1e5, concentration=1e-8)))
    reduced = regime_sweep_parameters(model, **common)
    full = regime_sweep_parameters(model, full_network=True, **common)
    assert reduced["implement"]["full_network"] is False
    assert full["implement"]["full_network"] is True
    assert reduced != full
