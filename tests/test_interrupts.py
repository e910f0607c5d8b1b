"""Ctrl-C (SIGINT) and SIGTERM stop every long command within a second, say what finished,
exit 130 / 143 and leave no worker process; an interrupted sweep resumes to the same table.

Each test runs ``python -m crn`` in a subprocess, waits until it is busy, sends the
signal and times the exit. The process table (/proc) is read while the command runs
(its worker processes) and after it exits (none of them may be left).
"""

import csv
import json
import signal
import time

import pytest
from click.testing import CliRunner
from proc_tools import alive, cpu_seconds, descendants, start, stop, wait_for

from crn.cli import cli

pytestmark = pytest.mark.skipif(not __import__("os").path.isdir("/proc"),
                                reason="reads the process table in /proc")

AM = "models/approximate_majority.toml"
EM = "models/exact_majority.toml"
PROMISE = 1.0  # seconds from the signal to the exit (README, "Interruption")


def interrupt(args, signum, busy, settle=0.0, timeout=60.0):
    """Start ``crn ARGS``; once ``busy(process)`` holds (and ``settle`` seconds more), send
    ``signum``. Returns (status, seconds to exit, stdout, stderr, worker pids seen)."""
    process = start(args)
    try:
        assert wait_for(lambda: busy(process), timeout), "the command never got busy"
        assert process.poll() is None, f"finished before the signal: {process.communicate()}"
        time.sleep(settle)
        workers = descendants(process.pid)
        status, elapsed, out, err = stop(process, signum)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    # no process the command started outlives it (the pool's resource tracker included)
    assert wait_for(lambda: not any(alive(pid) for pid in workers), 2.0), workers
    return status, elapsed, out, err, workers


def has_workers(count):
    return lambda process: len(descendants(process.pid)) >= count


def busy_for(seconds):
    """True once the command has used ``seconds`` of CPU: past its imports (about 2 s on
    an idle machine) and into the work; CPU time, unlike the clock, ignores machine load."""
    return lambda process: cpu_seconds(process.pid) >= seconds


def test_ssa_sigterm_on_two_workers_keeps_the_finished_runs(tmp_path):
    out = tmp_path / "runs.csv"
    # 100,000 runs of n = 3,000 keep two workers busy for minutes
    status, elapsed, stdout, stderr, workers = interrupt(
        ["ssa", AM, "--set", "n=3000", "--set", "gap=30", "--runs", "100000", "--workers", "2",
         "--seed", "1", "--csv", out], signal.SIGTERM, has_workers(3), settle=3.0)
    assert status == 143 and elapsed < PROMISE, (status, elapsed, stderr)
    assert len(workers) >= 2  # the two pool workers were running
    finished = int(stderr.split("terminated after ")[1].split(" of ")[0])
    assert "of 100000 runs" in stderr and f": {finished} runs" in stdout
    if finished:  # the finished runs are kept, marked partial
        lines = out.read_text().splitlines()
        assert lines[0] == (f"# partial: {finished} of 100000 runs (interrupted); "
                            "the rows are the finished runs")
        assert len(list(csv.DictReader(lines[1:]))) == finished
    assert [p.name for p in tmp_path.iterdir()] == (["runs.csv"] if finished else [])


def test_ssa_ctrl_c_during_one_long_run_in_process():
    # one run of n = 20,000,000 by the direct method takes far longer than the test waits
    status, elapsed, stdout, stderr, _ = interrupt(
        ["ssa", AM, "--set", "n=20000000", "--set", "gap=20000", "--runs", "3", "--workers", "1",
         "--engine", "direct", "--seed", "1"], signal.SIGINT, busy_for(5.0))
    assert status == 130 and elapsed < PROMISE, (status, elapsed, stderr)
    assert "interrupted after 0 of 3 runs" in stderr and "no run finished" in stdout


def test_exact_sigterm_during_the_enumeration():
    status, elapsed, _, stderr, _ = interrupt(
        ["exact", AM, "--set", "n=3000", "--set", "gap=10"], signal.SIGTERM, busy_for(5.0))
    assert status == 143 and elapsed < PROMISE, (status, elapsed, stderr)
    assert "terminated after enumerating" in stderr and "configurations; no result" in stderr


def test_verify_ctrl_c_reports_the_sizes_checked():
    status, elapsed, _, stderr, _ = interrupt(["verify", EM, "--n-max", "400"], signal.SIGINT,
                                              busy_for(5.0))
    assert status == 130 and elapsed < PROMISE, (status, elapsed, stderr)
    checked = stderr.split("interrupted after n = 2..")[1].split(" ")[0]
    assert 2 <= int(checked) < 400 and "(no counterexample among them)" in stderr


def test_copies_sigterm_gives_no_answer():
    status, elapsed, stdout, stderr, _ = interrupt(
        ["copies", AM, "--gap-fraction", "0.05", "--risk", "0.001", "--runs-max", "20000",
         "--method", "stochastic", "--seed", "3"], signal.SIGTERM, busy_for(5.0))
    assert status == 143 and elapsed < PROMISE, (status, elapsed, stderr)
    assert "terminated before the search finished; no answer" in stderr and stdout == ""


REGIMES = [AM, "--n", "100,1000,3000,10000", "--gap-fractions", "0.05", "--method",
           "stochastic", "--runs-max", "400", "--seed", "11"]


def cells_written(folder, count):
    def check(process):
        path = folder / "regimes.jsonl"
        return path.exists() and len(path.read_text().splitlines()) >= 1 + count
    return check


def test_regimes_ctrl_c_on_two_workers_then_resume_gives_the_same_table(tmp_path):
    status, elapsed, _, stderr, workers = interrupt(
        ["regimes", *REGIMES, "--workers", "2", "--out", tmp_path / "cut"], signal.SIGINT,
        cells_written(tmp_path / "cut", 1))
    assert status == 130 and elapsed < PROMISE, (status, elapsed, stderr)
    assert len(workers) >= 2
    kept = int(stderr.split("interrupted after ")[1].split(" of 4 cells")[0])
    assert 1 <= kept < 4 and "add --resume to finish the sweep" in stderr
    assert not (tmp_path / "cut" / "regimes.csv").exists()  # no table from a partial sweep

    runner = CliRunner()
    resumed = runner.invoke(cli, ["regimes", *REGIMES, "--workers", "1", "--out",
                                  str(tmp_path / "cut"), "--resume"], catch_exceptions=False)
    assert resumed.exit_code == 0, resumed.output
    whole = runner.invoke(cli, ["regimes", *REGIMES, "--workers", "1", "--out",
                                str(tmp_path / "whole")], catch_exceptions=False)
    assert whole.exit_code == 0, whole.output
    assert ((tmp_path / "cut" / "regimes.csv").read_text()
            == (tmp_path / "whole" / "regimes.csv").read_text())
    cut = json.loads((tmp_path / "cut" / "regimes.json").read_text())
    assert cut == json.loads((tmp_path / "whole" / "regimes.json").read_text())
