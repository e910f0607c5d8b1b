"""Direct-method SSA against the reference library's compiled solver (GillesPy2 SSACSolver).

Approximate majority from a tie at n = 1e6 to parallel time 40 (past consensus), same network,
same sample grid. Events per second of the reference are our mean event count over its wall
time (it does not report events; both engines sample the same process). Run:
    .venv/bin/python benchmarks/bench_direct.py [--n N] [--until T] [--repeats R]
"""

from __future__ import annotations

import argparse
import statistics
import time
import warnings

import numpy as np

from crn.engines.direct import run_direct
from crn.io.models import load_model
from crn.reference import _scons_on_path, to_gillespy2


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=10**6)
    parser.add_argument("--until", type=float, default=40.0)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    net = load_model("models/approximate_majority.toml", {"n": args.n, "gap": 0}).network
    times = np.linspace(0.0, args.until, 41)
    print(f"approximate majority, n = {args.n}, gap 0, horizon {args.until} parallel time")

    run_direct(net, until=1e-3, times=[0.0, 1e-3], rng=0)  # load the cached numba kernel
    ours, events = [], []
    for seed in range(args.repeats):
        start = time.perf_counter()
        run = run_direct(net, until=args.until, times=times, rng=seed)
        ours.append(time.perf_counter() - start)
        events.append(run.events)
    t_ours = statistics.median(ours)
    mean_events = float(np.mean(events))
    print(f"direct (ours):     {t_ours:8.3f} s median, {mean_events / t_ours:12.4g} events/s")

    import gillespy2

    model = to_gillespy2(net)
    model.timespan(times)
    start = time.perf_counter()
    try:
        with _scons_on_path(), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            solver = gillespy2.SSACSolver(model=model)
        name = "SSACSolver (compiled C++)"
    except Exception as err:  # no compiler here: fall back to its fastest pure-Python solver
        print(f"SSACSolver unavailable ({type(err).__name__}); using NumPySSASolver")
        solver = gillespy2.NumPySSASolver(model=model)
        name = "NumPySSASolver"
    compile_time = time.perf_counter() - start
    theirs = []
    for seed in range(args.repeats):
        start = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            solver.run(number_of_trajectories=1, seed=seed + 1)
        theirs.append(time.perf_counter() - start)
    t_theirs = statistics.median(theirs)
    print(f"{name}: {t_theirs:8.3f} s median run, {compile_time:.2f} s build, "
          f"{mean_events / t_theirs:12.4g} events/s")
    print(f"speed ratio without its build time: {t_theirs / t_ours:6.2f}x")
    print(f"speed ratio with its build time (one run): "
          f"{(t_theirs + compile_time) / t_ours:6.2f}x")


if __name__ == "__main__":
    main()
