"""Exact analysis of three-state approximate majority at n = 1000 (about 500,000 configurations).

Goal (issue 5): enumeration plus solve under 30 s and under 4 GiB. Prints the
configurations per second of the enumeration and of the whole analysis, the
peak memory (Python allocations traced by tracemalloc, and the process's peak
resident size, which also sees SuperLU's own allocations), and the ratios
against a reference run at n = 500 in the same process (about 4 times fewer
configurations). Run:
    .venv/bin/python benchmarks/bench_exact.py [--n N] [--reference N] [--method M]
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc

from crn.io.models import load_model
from crn.solvers.configurations import enumerate_configurations
from crn.solvers.exact import exact_outcomes, solve_absorption

GOAL_SECONDS = 30.0
GOAL_BYTES = 4 * 2**30


def measure(n: int, method: str) -> dict:
    net = load_model("models/approximate_majority.toml", {"n": n, "gap": 10}).network
    tracemalloc.start()
    tracemalloc.reset_peak()
    start = time.perf_counter()
    space = enumerate_configurations(net)
    enumerated = time.perf_counter()
    result = solve_absorption(net, space, method=method)
    done = time.perf_counter()
    traced = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return {"n": n, "states": space.n_states, "enumerate": enumerated - start,
            "solve": done - enumerated, "total": done - start, "traced": traced,
            "rss": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024, "result": result}


def report(row: dict) -> None:
    r = row["result"]
    print(f"n = {row['n']:>5}: {row['states']:>9,} configurations; enumerate "
          f"{row['enumerate']:6.2f} s ({row['states'] / row['enumerate']:,.0f} /s), "
          f"solve {row['solve']:6.2f} s ({r.method}), total {row['total']:6.2f} s "
          f"({row['states'] / row['total']:,.0f} configurations/s)")
    print(f"          peak traced {row['traced'] / 2**20:8.1f} MiB, peak resident "
          f"{row['rss'] / 2**20:8.1f} MiB; P(X) = {r.probabilities['X']:.10f}, "
          f"E[T] = {r.expected_time:.6f} +- {r.time_std:.6f}, residual {r.residual:.1e}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=1000)
    parser.add_argument("--reference", type=int, default=500)
    parser.add_argument("--method", default="auto", choices=["auto", "direct", "iterative"])
    args = parser.parse_args()
    exact_outcomes(load_model("models/approximate_majority.toml", {"n": 10}).network)  # JIT cache
    reference = measure(args.reference, args.method)
    report(reference)
    target = measure(args.n, args.method)
    report(target)
    rate = target["states"] / target["total"]
    rate_ref = reference["states"] / reference["total"]
    print(f"ratio n={args.n} / n={args.reference}: configurations "
          f"{target['states'] / reference['states']:.2f}x, time "
          f"{target['total'] / reference['total']:.2f}x, configurations/s {rate / rate_ref:.2f}x")
    ok_time = target["total"] < GOAL_SECONDS
    ok_memory = max(target["rss"], target["traced"]) < GOAL_BYTES
    print(f"goal under {GOAL_SECONDS:.0f} s: {'met' if ok_time else 'MISSED'}; "
          f"under {GOAL_BYTES / 2**30:.0f} GiB: {'met' if ok_memory else 'MISSED'}")


if __name__ == "__main__":
    main()
