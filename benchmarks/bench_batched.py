"""Speed of the batched engine, printed as rates and ratios in one run (not a test).

Run ``python benchmarks/bench_batched.py`` (add ``--quick`` to skip the 2**50 case).
Each figure is measured after a warm-up call that compiles (or loads) the
numba kernels, on one core. The reference is the direct method on the same
protocol at n = 10**6 in the same process: the ratio says how many times more
interactions per second the batched engine simulates.

Goals: approximate majority from a tie to consensus at n = 1e9 under
10 s median; one unit of parallel time at n = 2**50 under 200 s (published
anchor: 2**50 interactions among 2**50 agents in under 400 s, Berenbrink et al.,
ESA 2020); a generated protocol with at least 100 states at n = 1e8 at 1e8
interactions per second or more, and how the rate falls with 10, 100 and 1,000
states.

Where the many-state time goes (101 states, n = 1e8, batches of about 6,300
interactions; measured on a loaded shared machine, so as shares): before, two
multivariate hypergeometric draws of 101 colours each (about a third), pairing
agent by agent with a group per outcome (about half) and applying the groups.
Now the 2 l agents of a batch are one draw split by a shuffle (from 16 states
on), and without a consensus to watch each interaction is applied at once from
one packed table entry: 1.3x at n = 1e8 and 1.9x at n = 1e6 in the same process
against the previous kernel; fewer than 16 states keep their exact random
stream (same seed, same run).
"""

from __future__ import annotations

import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

from crn.core.generate import protocol_from_rule
from crn.core.translate import protocol_to_network
from crn.engines.batched import run_batched
from crn.engines.direct import run_direct
from crn.io.models import load_model

MODEL = Path(__file__).resolve().parent.parent / "models" / "approximate_majority.toml"


def approximate_majority(n: int, gap: int = 0):
    return load_model(MODEL, {"n": n, "gap": gap}).network


def averaging(n: int, m: int = 50):
    """Discrete averaging: two agents replace their values a, b in [-m, m] by the
    ceiling and floor of (a + b) / 2; the sign reports the majority (2m + 1 states)."""

    def rule(a, b):
        s = a + b
        hi, lo = -((-s) // 2), s // 2
        return None if {hi, lo} == {a, b} else (hi, lo)

    def output(v):
        return "X" if v > 0 else ("Y" if v < 0 else None)

    protocol = protocol_from_rule("averaging", rule, {m: n // 2 + 1, -m: n - n // 2 - 1},
                                  output=output, naming=lambda v: f"v{v}".replace("-", "m"))
    return protocol_to_network(protocol)


def timed(fn):
    start = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - start


def main(quick: bool = False) -> None:
    # warm-up: compile or load every kernel once
    run_batched(approximate_majority(10**4), until=2.0, rng=0)
    run_direct(approximate_majority(10**3), until=2.0, rng=0)

    # reference: the direct method, approximate majority at n = 1e6 for 5 units of time
    n_ref, t_ref = 10**6, 5.0
    _, wall = timed(lambda: run_direct(approximate_majority(n_ref), until=t_ref, times=[t_ref],
                                       rng=1))
    direct_rate = n_ref * t_ref / wall
    _, wall = timed(lambda: run_batched(approximate_majority(n_ref), until=t_ref,
                                        times=[t_ref], rng=1))
    print(f"reference n=1e6, {t_ref:g} time units: direct {direct_rate:.3g} interactions/s, "
          f"batched {n_ref * t_ref / wall:.3g} /s (ratio {n_ref * t_ref / wall / direct_rate:.1f})")

    # 1. approximate majority from a tie to consensus at n = 1e9
    n = 10**9
    net = approximate_majority(n, 0)
    walls, rates = [], []
    for seed in range(5):
        run, wall = timed(lambda s=seed: run_batched(net, until=math.inf, rng=s,
                                                      stop_at_consensus=True))
        walls.append(wall)
        rates.append(n * run.outcome.time / wall)
        print(f"  n=1e9 seed {seed}: consensus {run.outcome.label} at parallel time "
              f"{run.outcome.time:.2f} ({n * run.outcome.time:.3g} interactions) in {wall:.2f} s")
    print(f"1. AM tie -> consensus, n=1e9: median {statistics.median(walls):.2f} s (goal < 10 s); "
          f"effective {statistics.median(rates):.3g} interactions/s, "
          f"{statistics.median(rates) / direct_rate:.0f} x the direct method")

    # 3. generated protocols with 11, 101 and 1001 states at n = 1e8
    n = 10**8
    for m, until in ((5, 3.0), (50, 3.0), (500, 0.5)):
        net = averaging(n, m)
        run_batched(net, until=until / 100, times=[until / 100], rng=2)  # tables, kernels
        run, wall = timed(lambda net=net, until=until: run_batched(net, until=until,
                                                                   times=[until], rng=2))
        print(f"3. averaging protocol, {net.n_species:>4} states, n=1e8, {until:g} units of "
              f"parallel time: {wall:6.2f} s, {n * until / wall:.3g} interactions/s"
              f"{' (goal 1e8)' if m == 50 else ''}, {n * until / wall / direct_rate:.0f} x the "
              f"direct method; {int((run.counts[-1] > 0).sum())} states still populated")

    if quick:
        return
    # 2. one unit of parallel time at n = 2**50
    n = 2**50
    net = approximate_majority(n, 0)
    run, wall = timed(lambda: run_batched(net, until=1.0, times=[1.0], rng=3))
    print(f"2. AM, n=2**50, one unit of parallel time ({n:.3g} interactions): {wall:.1f} s "
          f"(goal < 200 s; published anchor < 400 s), {n / wall:.3g} interactions/s, "
          f"{n / wall / direct_rate:.0f} x the direct method")
    assert run.counts.sum() == n and np.isfinite(run.end_time)


if __name__ == "__main__":
    main(quick="--quick" in sys.argv[1:])
