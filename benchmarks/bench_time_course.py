"""Time courses: what recording and reducing cost, and the memory of a large reduction.

1. Speed: an ensemble of the birth-death model (``models/birth_death.toml``) on one worker,
   once as plain ``simulate`` (the default 101 samples, no reduction: the path without
   ``--every``) and once with ``--every``-style sampling (1,000 samples) reduced on the fly;
   the ratio is printed.
2. Memory: the reduction of 100,000 runs x 1,000 samples x 10 species (synthetic counts, so
   only the reduction is measured), peak traced memory against the 8 GB the counts would take.
Run:
    .venv/bin/python benchmarks/bench_time_course.py [--runs R] [--big-runs N]
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np

from crn.io.models import load_model
from crn.solvers.simulate import simulate
from crn.solvers.time_course import TimeCourseAccumulator, sample_times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5000)
    parser.add_argument("--big-runs", type=int, default=100_000)
    args = parser.parse_args()
    net = load_model("models/birth_death.toml").network
    simulate(net, runs=2, until=1.0, rng=0, workers=1)  # load the numba kernel

    start = time.perf_counter()
    simulate(net, runs=args.runs, until=10.0, rng=1, workers=1)
    plain = time.perf_counter() - start
    times = sample_times(0.01, 10.0)
    acc = TimeCourseAccumulator(times, net.species, args.runs, rng=1)
    start = time.perf_counter()
    simulate(net, runs=args.runs, until=10.0, times=times, rng=1, workers=1, reduce=acc)
    acc.result()
    reduced = time.perf_counter() - start
    print(f"{args.runs} runs of {net.name!r} to t = 10 on one worker")
    print(f"  plain (101 samples, no reduction): {plain:8.2f} s")
    print(f"  --every 0.01 (1001 samples, reduced): {reduced:8.2f} s   ratio {reduced / plain:.2f}")

    n_times, n_species = 1000, 10
    runs = args.big_runs
    base = np.random.default_rng(0).integers(0, 1000, size=(n_times, n_species))
    acc = TimeCourseAccumulator(np.arange(n_times, dtype=float),
                                [f"S{i}" for i in range(n_species)], runs, rng=2)
    tracemalloc.start()
    start = time.perf_counter()
    for r in range(runs):
        acc.add(r, base + (r % 97))
    course = acc.result()
    elapsed = time.perf_counter() - start
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    held = runs * n_times * n_species * 8
    print(f"reduction of {runs} runs x {n_times} samples x {n_species} species: "
          f"{elapsed:.1f} s, peak {peak / 2**20:.0f} MiB (all counts: {held / 2**30:.1f} GiB); "
          f"quantiles from {course.quantile_runs} runs")


if __name__ == "__main__":
    main()
