"""Benchmark: the default approximate-majority regime map with 1 and 2 workers.

Six populations from 1e2 to 1e7 and eight relative gaps; prints the wall time
of each run and the ratio (goal: under 5 minutes with 2 workers). Both runs use
the same seed, so they also check that the worker count does not change a number.

    python benchmarks/bench_regimes.py [--runs-max R] [--n LIST]

Where the time goes (profiled cell by cell with cProfile on a shared two-core
machine carrying six to ten other jobs, so the seconds are inflated; their
proportions are the point):

* Stochastic runs are nearly all of it, and the largest n dominate. One
  batched run to consensus took 12 ms at n = 1e5, 41 ms at n = 1e6 and 130 ms
  (gap 0.3 n) to 640 ms (gap 0.0003 n, consensus near parallel time 43) at
  n = 1e7, that is 1.5e8, 5e8 and 0.7e9 to 1.8e9 interactions per second.
  Stopping a run once one opinion is extinct (its label can then no longer
  change) would save little: the last phase, blanks adopting the surviving
  opinion, is 8 to 25 % of the parallel time (five runs at n = 1e6 and 1e7)
  and less of the wall time, since the engine skips the null interactions
  that fill it.
* Runs per cell. A cell with no disagreeing run used to need 800 runs: with
  the Bonferroni split of the 95% interval over the six looks of the 1000-run
  schedule (0.025 / 6 per side and look), the upper bound of 0 in n runs first
  drops below risk 0.01 at n = 546. The ok side of the interval now keeps
  every decision of that split and moves the error it does not need to the
  look at 400 runs (crn.analyses.probes.look_levels), so such a cell is ok
  after 400 runs; no test with the same 0.025 error on that side can decide
  before 367 runs (0.99^n < 0.025). Uncertain cells still take 1000 runs,
  misleading ones mostly 50. Runs over the rows n = 1e3, 1e4, 1e5, 1e6, 1e7
  fell from 2400, 3600, 4150, 4900, 5650 to 2000, 2200, 2150, 2500, 2850.
* The direct method's cells (n = 1e3, 1e4) cost 3 to 15 s each; at n = 1e4 the
  batched engine is about three times faster per run (17 against 48 ms on the
  loaded machine), so protocol cells from 5000 agents now run batched. Exact
  cells (n = 100) take under 0.5 s, of which 200 timing runs take a quarter.
* The mean-field decision takes 0.03 s per cell and the configuration
  estimate 0.01 to 0.05 s, once each worker has imported scipy (1.6 s, once).
* Not a cost: the worker pool is started once per sweep, not per cell; a cell
  ships its (network builder, n, gap), a few hundred bytes; numba kernels load
  from the on-disk cache once per worker.

* Cells a monotone neighbour decides. Measured cell by cell on one worker
  (seed 2026): the n = 1e7 row cost about 15 s for its misleading cell (50
  runs) and 100 s for each ok cell (400 runs, 0.13 to 0.3 s a run), so its seven
  ok cells were over two thirds of the map. Approximate majority is monotone
  (crn.analyses.monotone: with Y < B < X every transition keeps the agent-wise
  order, so a coupling proves that a larger gap disagrees no more often by the
  same horizon); each row now runs in increasing gap, and the cells after its
  first sampled ok cell inherit that cell's bound and horizon and run only the
  first round of 50 runs (for the estimate and the median time). The row is
  then one task, so the 1e7 row (about 150 s) is the critical path.

Before: about 25 minutes on one worker. After the sequential test and the
engine choice: 336 s on two workers (quiet machine, numba cache warm), with
11,700 runs against 20,700. After implied cells (quiet machine, numba cache
warm): 176.6 s on two workers and 241.6 s on one, with 5,400 runs; both give the
same cells.

Same table: each cell's ODE label, flag and time flag must equal the recorded
table of the earlier code for seed 2026 (``regimes_seed2026.json``, computed
with one shared memo of runs so both versions saw the same random streams);
the script prints the differences. Checked: all 43 cells keep their label,
flag and time flag, and the critical-gap exponent (0.494) lies inside the
recorded 95% interval (0.480 .. 0.499; recorded estimate 0.489).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

from crn.analyses.probes import InitialSplit
from crn.analyses.regimes import regime_map
from crn.io.models import load_model

ROOT = Path(__file__).resolve().parent.parent
NS = [100, 1_000, 10_000, 100_000, 1_000_000, 10_000_000]
FRACTIONS = [0.0003, 0.001, 0.003, 0.01, 0.02, 0.05, 0.1, 0.3]
#: The default map's table for seed 2026 as the code before the faster sequential test
#: and engine choice computed it (Bonferroni over looks, direct method below 1e5 agents).
RECORDED = Path(__file__).resolve().parent / "regimes_seed2026.json"
#: What must not change: the classification of every cell.
TABLE_KEYS = ("ode_label", "flag", "time_flag")


def run(workers: int, ns, runs_max: int):
    net = load_model(ROOT / "models" / "approximate_majority.toml").network
    started = time.perf_counter()
    result = regime_map(InitialSplit(net), ns, gap_fractions=FRACTIONS, runs_max=runs_max,
                        rng=2026, workers=workers)
    return time.perf_counter() - started, result


def compare_with_recorded(result, path: Path = RECORDED) -> list[str]:
    """Differences between this map's table and the recorded one (cells on both grids).

    Each cell's ODE label, flag and time flag must match; the critical-gap exponent
    must lie inside the recorded 95% bootstrap interval.
    """
    recorded = json.loads(path.read_text())
    by_key = {(c["n"], c["gap"]): c for c in recorded["cells"]}
    out = []
    for cell in result.cells:
        old = by_key.get((cell.n, cell.gap))
        if old is None:
            continue
        for key in TABLE_KEYS:
            if getattr(cell, key) != old[key]:
                out.append(f"n={cell.n} gap={cell.gap}: {key} {old[key]} -> {getattr(cell, key)}")
    b, old_b = result.boundary, recorded["boundary"]
    if len(by_key) == len(result.cells) and old_b.get("low") is not None:
        if b.exponent is None or not old_b["low"] <= b.exponent <= old_b["high"]:
            out.append(f"exponent {b.exponent} outside the recorded interval "
                       f"[{old_b['low']:.3f}, {old_b['high']:.3f}]")
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--runs-max", type=int, default=1000)
    parser.add_argument("--n", default=",".join(str(n) for n in NS))
    parser.add_argument("--workers", default="1,2",
                        help="worker counts to time, comma-separated (default 1,2)")
    args = parser.parse_args()
    ns = [int(float(x)) for x in args.n.split(",")]
    counts = [int(w) for w in args.workers.split(",")]
    print(f"regime map: approximate majority, n = {ns}, {len(FRACTIONS)} relative gaps, "
          f"runs_max {args.runs_max}")
    results = {}
    for w in counts:
        seconds, result = run(w, ns, args.runs_max)
        results[w] = (seconds, result)
        print(f"{w} worker{'s' if w > 1 else ' '}: {seconds:8.1f} s" +
              ("   (goal < 300 s)" if w == 2 else ""))
    if len(counts) > 1:
        first, last = results[counts[0]], results[counts[-1]]
        print(f"ratio {counts[0]} / {counts[-1]} workers: {first[0] / last[0]:.2f}")
        print(f"same numbers on {counts[0]} and {counts[-1]} workers:",
              first[1].cells == last[1].cells)
    result = results[counts[-1]][1]
    b = result.boundary
    if b.exponent is not None:
        print(f"critical-gap exponent {b.exponent:.3f} [{b.low:.3f}, {b.high:.3f}]")
    runs = sum(c.runs for c in result.cells)
    print(f"{len(result.cells)} cells, {runs} stochastic runs, "
          f"{sum(c.method == 'exact' for c in result.cells)} exact cells")
    if args.runs_max == 1000:
        differences = compare_with_recorded(result)
        print("same table as recorded for seed 2026:", "yes" if not differences else "NO")
        for line in differences:
            print("  " + line)


if __name__ == "__main__":
    main()
