"""Exact analysis of three-state approximate majority at n = 3000 (4.5 million configurations).

Goal: enumeration plus solve under 60 s and 8 GiB at n = 3000 (earlier goal:
n = 1000 under 30 s and 4 GiB). Prints, for a reference run at n = 1000 and then
the target in the same process, the seconds of each stage, the peak resident
memory of the process (it only grows, so the second figure is the target's),
the guard's estimate beside it, and the ratio target / reference. With
``--superlu`` the reference n is also solved by SuperLU (``method="direct"``,
the solver before nested dissection) for the ratio in the same process.

Where the time goes (``OPENBLAS_NUM_THREADS=1``, CPU seconds of a profiling run
of the first version, shared 2-core machine at load 8-12, where wall time was
3-4x these):

    n (configurations)    enumerate  reach  assemble  order  factor  solves   total
    1000 (0.50 M)              0.4    0.06      0.2    0.5     2.4     0.6      4.3
    2000 (2.0 M)               2.3    0.3       0.8    2.5    11.6     2.9     20.4
    3000 (4.5 M)               7.3    1.0       3.4    6.3    34.2     7.8     60

The assembly was then made one compiled pass, the solves one pass over the
factors for all right-hand sides, and the enumeration stopped copying. The
factorisation is 13, 105 and 356 GFlop at n = 1000, 2000, 3000 (37 N^1.5, as
nested dissection predicts on a two-dimensional lattice), and its factors hold
100, 115 and 124 entries per configuration (4.5 GB at n = 3000, most of the
peak). SuperLU with minimum degree, the solver before: factorisation 3.0 s,
32 s and 136 s at the same n (a quiet machine), peak 1.2, 4.9 and 11.3 GiB.

Last run (this script, ``OPENBLAS_NUM_THREADS=1``, load 8-9 on 2 cores): n = 1000
3.6 s CPU (11.6 s wall); n = 3000 53 s CPU (230 s wall), peak resident 6.77 GiB
against the guard's 6.56 GiB; CPU ratio 14.9x for 9x the configurations. With
``--superlu`` at n = 1000: SuperLU 4.2 s CPU, 30 s wall; nested dissection 0.35x
its wall time, P(X) equal to 3e-15.

OpenBLAS runs each dense kernel on every core; on a machine loaded by other
jobs its threads wait for each other, so the script should be run once as is
and once with ``OPENBLAS_NUM_THREADS=1``. Run:
    .venv/bin/python benchmarks/bench_exact.py [--n N] [--reference N] [--superlu]
"""

from __future__ import annotations

import argparse
import resource
import time

from crn.io.models import load_model
from crn.runtime.guards import exact_estimate, format_bytes
from crn.solvers.configurations import enumerate_configurations
from crn.solvers.exact import exact_outcomes, solve_absorption

GOAL_SECONDS = 60.0
GOAL_BYTES = 8 * 2**30
STAGES = ("enumerate", "reach", "assemble", "order", "factor", "solve")


def network(n: int):
    return load_model("models/approximate_majority.toml", {"n": n, "gap": 10}).network


def measure(n: int, method: str = "auto") -> dict:
    net = network(n)
    timings: dict[str, float] = {}
    cpu = time.process_time()
    start = time.perf_counter()
    space = enumerate_configurations(net)
    timings["enumerate"] = time.perf_counter() - start
    result = solve_absorption(net, space, method=method, timings=timings)
    total = time.perf_counter() - start
    return {"n": n, "states": space.n_states, "timings": timings, "total": total,
            "cpu": time.process_time() - cpu, "result": result,
            "rss": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
            "estimate": exact_estimate(net)}


def report(row: dict) -> None:
    r = row["result"]
    stages = ", ".join(f"{k} {row['timings'].get(k, 0.0):.2f}" for k in STAGES)
    print(f"n = {row['n']:>5}: {row['states']:>9,} configurations, {r.method}: total "
          f"{row['total']:.2f} s wall, {row['cpu']:.2f} s CPU ({stages})")
    print(f"          peak resident {format_bytes(row['rss'])} (guard's estimate "
          f"{format_bytes(row['estimate'].memory)}, {row['estimate'].seconds:.0f} s); "
          f"P(X) = {r.probabilities['X']:.12f}, E[T] = {r.expected_time:.9f} "
          f"+- {r.time_std:.9f}, residual {r.residual:.1e}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=3000)
    parser.add_argument("--reference", type=int, default=1000)
    parser.add_argument("--superlu", action="store_true",
                        help="also solve the reference n with SuperLU (method='direct')")
    args = parser.parse_args()
    exact_outcomes(network(10), method="dissection")  # compiled kernels from the disk cache
    reference = measure(args.reference)
    report(reference)
    if args.superlu:
        old = measure(args.reference, "direct")
        report(old)
        gap = abs(reference["result"].probabilities["X"] - old["result"].probabilities["X"])
        print(f"n = {args.reference}: nested dissection / SuperLU time "
              f"{reference['total'] / old['total']:.2f}x, CPU "
              f"{reference['cpu'] / old['cpu']:.2f}x; P(X) differs by {gap:.1e}")
    target = measure(args.n)
    report(target)
    print(f"ratio n={args.n} / n={args.reference}: configurations "
          f"{target['states'] / reference['states']:.2f}x, time "
          f"{target['total'] / reference['total']:.2f}x, "
          f"CPU {target['cpu'] / reference['cpu']:.2f}x")
    ok_time = target["total"] < GOAL_SECONDS
    ok_memory = target["rss"] < GOAL_BYTES
    print(f"goal under {GOAL_SECONDS:.0f} s: {'met' if ok_time else 'MISSED'} (wall; CPU "
          f"{target['cpu']:.0f} s); under {GOAL_BYTES / 2**30:.0f} GiB: "
          f"{'met' if ok_memory else 'MISSED'}")


if __name__ == "__main__":
    main()
