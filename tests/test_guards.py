"""Resource guards: the estimate comes before any work and refuses (exit 2, one line)
beyond --max-memory or a day of stochastic work; --force runs anyway."""

import json
import time

import pytest
from click.testing import CliRunner

from crn.cli import cli, main
from crn.core.errors import CRNError
from crn.io.models import load_model
from crn.runtime.guards import (
    WORK_LIMIT_SECONDS,
    default_max_memory,
    ensemble_estimate,
    exact_estimate,
    parse_memory,
)
from crn.solvers.simulate import simulate

AM = "models/approximate_majority.toml"
EM = "models/exact_majority.toml"


def refusal(args, capsys):
    began = time.monotonic()
    code = main(args)
    elapsed = time.monotonic() - began
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1, err
    return err[0], elapsed


@pytest.mark.parametrize("text, size", [("4G", 4 * 2**30), ("512MiB", 512 * 2**20),
                                        ("2.5GB", 2_500_000_000), ("1000", 1000),
                                        ("1e6", 10**6), (" 3 k ", 3 * 1024)])
def test_sizes_are_read_in_binary_and_decimal_units(text, size):
    assert parse_memory(text) == size


@pytest.mark.parametrize("text", ["", "4X", "-1G", "0", "nan", "inf", "1e999G", "G"])
def test_bad_sizes_are_refused(text):
    with pytest.raises(CRNError, match="--max-memory"):
        parse_memory(text)


def test_default_limit_is_half_the_ram():
    # /proc/meminfo is the kernel's own account of the same memory (in kB)
    with open("/proc/meminfo") as fh:
        total_kib = int(next(line for line in fh if line.startswith("MemTotal:")).split()[1])
    assert default_max_memory() == pytest.approx(total_kib * 1024 / 2, rel=0.01)


def test_ssa_with_n_1e18_is_refused_at_once_with_the_estimate(capsys):
    line, elapsed = refusal(["ssa", AM, "--set", "n=1e18", "--set", "gap=2", "--seed", "1"],
                            capsys)
    assert elapsed < 5  # the estimate, not the work
    assert "needs about" in line and "years" in line and "more than 24 h" in line
    assert "--force" in line and "events per run" in line


def test_every_engine_is_refused_beyond_the_limit(capsys):
    for engine in ("direct", "batched", "reference"):
        line, _ = refusal(["ssa", AM, "--set", "n=1e15", "--set", "gap=2", "--engine", engine,
                           "--seed", "1"], capsys)
        assert f"{engine} runs" in line


def test_long_but_allowed_work_is_announced(capsys):
    net = load_model(AM, {"n": 10**6, "gap": 10}).network
    est = ensemble_estimate(net, runs=4, until=50.0, engine="direct", workers=1)
    # derived: a protocol's network fires at most one reaction per interaction, and one unit
    # of parallel time is n interactions: 1e6 * 50 events per run, 4 runs
    assert est.seconds == pytest.approx(4 * 1e6 * 50 * 3e-7)
    assert 10 < est.seconds < WORK_LIMIT_SECONDS


def test_the_event_estimate_bounds_real_runs():
    net = load_model(AM, {"n": 400, "gap": 10}).network
    ens = simulate(net, runs=20, until=30.0, rng=5, workers=1)
    bound = ensemble_estimate(net, runs=1, until=30.0, engine="direct", workers=1)
    per_run = float(bound.detail.split("up to ")[1].split(" events")[0])
    assert ens.events.max() <= per_run == 400 * 30.0


def test_exact_refused_above_max_memory_and_forced_gives_the_same_answer(capsys):
    line, _ = refusal(["exact", AM, "--set", "n=40", "--max-memory", "1K"], capsys)
    assert "more than --max-memory 1 KiB" in line and "configurations" in line
    runner = CliRunner()
    forced = runner.invoke(cli, ["exact", AM, "--set", "n=40", "--max-memory", "1K", "--force",
                                 "--json"], catch_exceptions=False)
    free = runner.invoke(cli, ["exact", AM, "--set", "n=40", "--json"], catch_exceptions=False)
    assert forced.exit_code == free.exit_code == 0
    assert json.loads(forced.stdout) == json.loads(free.stdout)


def test_exact_estimate_counts_the_compositions():
    net = load_model(AM, {"n": 3000}).network
    est = exact_estimate(net)
    # derived: n agents in 3 states have C(n + 2, 2) compositions
    assert est.detail == f"up to {3002 * 3001 // 2:,} configurations"
    assert est.memory > 1e9  # several GiB: the chain at n = 3000 is a large object


def test_exact_estimate_is_the_measured_peak_to_an_order_of_magnitude():
    # the numpy allocations of the whole exact analysis (enumeration, system, ordering,
    # factors, solves), traced by tracemalloc; compiled kernels' own scratch arrays are
    # not traced, so the measured figure is a little low
    import tracemalloc

    from crn.solvers.exact import exact_outcomes

    exact_outcomes(load_model(AM, {"n": 10, "gap": 2}).network, method="dissection")  # JIT
    net = load_model(AM, {"n": 300, "gap": 10}).network
    tracemalloc.start()
    try:
        result = exact_outcomes(net)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert result.method == "dissection"
    assert 0.25 < exact_estimate(net).memory / peak < 4


def test_exact_at_n_3000_is_refused_at_once_with_its_estimate(capsys):
    # 4.5 million configurations: refused before any enumeration, naming the estimate
    line, elapsed = refusal(["exact", AM, "--set", "n=3000", "--max-memory", "2G"], capsys)
    assert line.startswith("crn: exact analysis of three-state approximate majority needs about")
    assert "4,504,501 configurations" in line and "GiB of memory" in line
    assert "more than --max-memory 2 GiB" in line and elapsed < 5


def test_a_long_exact_analysis_announces_its_estimate_first(capsys):
    from crn.commands.options import guard

    # derived: 18 million transitions at 1e-6 s plus 37 N^1.5 flops at 1e10 per second
    est = exact_estimate(load_model(AM, {"n": 3000}).network)
    assert 40 < est.seconds < 70 and 4 * 2**30 < est.memory < 8 * 2**30
    guard(est, 16 * 2**30, False)
    err = capsys.readouterr().err
    assert err.startswith("crn: estimated work for exact analysis") and "GiB" in err


def test_verify_regimes_and_time_courses_are_guarded(capsys):
    line, _ = refusal(["verify", EM, "--n-max", "50", "--max-memory", "1K"], capsys)
    assert line.startswith("crn: verify up to n = 50 needs")
    line, _ = refusal(["regimes", AM, "--n", "100,1000", "--gaps", "10", "--max-memory", "1K",
                       "--seed", "1"], capsys)
    assert "the regime map over 2 cells needs" in line
    # a million runs keep 101 samples x 3 species x 8 bytes each: 2.4 GB of time course
    line, _ = refusal(["ssa", AM, "--set", "n=20", "--runs", "1000000", "--max-memory", "1G",
                       "--seed", "1"], capsys)
    assert "more than --max-memory 1 GiB" in line and "2.26 GiB" in line


def test_bad_max_memory_is_a_usage_error(capsys):
    assert main(["exact", AM, "--max-memory", "lots"]) == 2
    err = capsys.readouterr().err
    assert "cannot read 'lots' as a size" in err and len(err.strip().splitlines()) == 1
