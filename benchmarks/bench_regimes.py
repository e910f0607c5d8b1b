"""Benchmark: the default approximate-majority regime map with 1 and 2 workers.

Six populations from 1e2 to 1e7 and eight relative gaps; prints the wall time
of each run and the ratio (goal: under 5 minutes with 2 workers). Both runs use
the same seed, so they also check that the worker count does not change a number.

    python benchmarks/bench_regimes.py [--runs-max R] [--n LIST]

Where the time goes (profiled cell by cell with cProfile on a shared two-core
machine carrying six to ten other jobs, so the seconds are inflated; their
proportions are the point):

* Stochastic runs are nearly all of it, and the largest n dominate. A cell
  that the mean field gets right needs 800 runs (with no disagreeing run, the
  upper end of the Bonferroni-corrected interval over the six looks of the
  1000-run schedule first drops below risk 0.01 at 800 runs), an uncertain cell
  1000, a misleading one often only 50. One batched run to consensus took
  12 ms at n = 1e5, 41 ms at n = 1e6 and 130 ms (gap 0.3 n) to 640 ms
  (gap 0.0003 n, consensus near parallel time 43) at n = 1e7, that is
  1.5e8, 5e8 and 0.7e9 to 1.8e9 interactions per second. So a cell costs about
  10 s at n = 1e5, 35 s at n = 1e6 and 100 to 600 s at n = 1e7: the eight
  n = 1e7 cells are about 80 % of the map, the n = 1e6 cells most of the rest.
* The direct method's cells (n = 1e3, 1e4; auto switches to the batched engine
  from 1e5 agents) cost 3 to 15 s each; exact cells (n = 100) under 0.5 s,
  of which 200 timing runs take a quarter.
* The mean-field decision takes 0.03 s per cell and the configuration
  estimate 0.01 to 0.05 s, once each worker has imported scipy (1.6 s, once).
* Not a cost: the worker pool is started once per sweep, not per cell; a cell
  ships its (network builder, n, gap), a few hundred bytes; numba kernels load
  from the on-disk cache once per worker.

Measured here: n = 1e2 .. 1e5 (the 32 smaller cells) took 189 s on one worker.
The default map stays far above 5 minutes on two workers. The levers left
change the table, which this map must keep for its seed: fewer runs (a cell a
monotone neighbour already decides), a different engine for a cell (batched
below 1e5 agents, exact chains above 1e5 configurations), or a different
random stream in the three-state batched kernel; each needs its own decision.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from crn.analyses.probes import InitialSplit
from crn.analyses.regimes import regime_map
from crn.io.models import load_model

ROOT = Path(__file__).resolve().parent.parent
NS = [100, 1_000, 10_000, 100_000, 1_000_000, 10_000_000]
FRACTIONS = [0.0003, 0.001, 0.003, 0.01, 0.02, 0.05, 0.1, 0.3]


def run(workers: int, ns, runs_max: int):
    net = load_model(ROOT / "models" / "approximate_majority.toml").network
    started = time.perf_counter()
    result = regime_map(InitialSplit(net), ns, gap_fractions=FRACTIONS, runs_max=runs_max,
                        rng=2026, workers=workers)
    return time.perf_counter() - started, result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--runs-max", type=int, default=1000)
    parser.add_argument("--n", default=",".join(str(n) for n in NS))
    args = parser.parse_args()
    ns = [int(float(x)) for x in args.n.split(",")]
    print(f"regime map: approximate majority, n = {ns}, {len(FRACTIONS)} relative gaps, "
          f"runs_max {args.runs_max}")
    one, first = run(1, ns, args.runs_max)
    print(f"1 worker : {one:8.1f} s")
    two, second = run(2, ns, args.runs_max)
    print(f"2 workers: {two:8.1f} s   (goal < 300 s)")
    print(f"ratio 1 worker / 2 workers: {one / two:.2f}")
    print("same numbers on 1 and 2 workers:", first.cells == second.cells)
    b = second.boundary
    if b.exponent is not None:
        print(f"critical-gap exponent {b.exponent:.3f} [{b.low:.3f}, {b.high:.3f}]")
    runs = sum(c.runs for c in second.cells)
    print(f"{len(second.cells)} cells, {runs} stochastic runs, "
          f"{sum(c.method == 'exact' for c in second.cells)} exact cells")


if __name__ == "__main__":
    main()
