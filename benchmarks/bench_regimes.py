"""Benchmark: the default approximate-majority regime map with 1 and 2 workers.

Six populations from 1e2 to 1e7 and eight relative gaps; prints the wall time
of each run and the ratio (goal: under 5 minutes with 2 workers). Both runs use
the same seed, so they also check that the worker count does not change a number.

    python benchmarks/bench_regimes.py [--runs-max R] [--n LIST]
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from crn.io.models import load_model
from crn.probes import InitialSplit
from crn.regimes import regime_map

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
