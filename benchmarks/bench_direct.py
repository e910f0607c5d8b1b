"""Direct-method SSA against the reference library's compiled solver (GillesPy2 SSACSolver).

Approximate majority from a tie at n = 1e6 to parallel time 40 (past consensus), same network,
same sample grid. Events per second of the reference are our mean event count over its wall
time (it does not report events; both engines sample the same process).

Then the whole command: ``crn ssa`` (one run, direct method, one worker) as a fresh process,
start-up, model loading and report included, against the reference solver's ``run`` alone
(its build excluded). Both are given as wall time and as CPU time (user + system, children
included), since on a shared machine the wall time also counts waiting for a core.
Goal: the whole command at least as fast as the reference's run. Run:
    .venv/bin/python benchmarks/bench_direct.py [--n N] [--until T] [--repeats R]
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from crn.engines.direct import run_direct
from crn.engines.gillespy2_bridge import _scons_on_path, to_gillespy2
from crn.io.models import load_model


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
    theirs, theirs_cpu = [], []
    for seed in range(args.repeats):
        cpu = _cpu()
        start = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            solver.run(number_of_trajectories=1, seed=seed + 1)
        theirs.append(time.perf_counter() - start)
        theirs_cpu.append(_cpu() - cpu)
    t_theirs = statistics.median(theirs)
    print(f"{name}: {t_theirs:8.3f} s median run, {compile_time:.2f} s build, "
          f"{mean_events / t_theirs:12.4g} events/s")
    print(f"speed ratio without its build time: {t_theirs / t_ours:6.2f}x")
    print(f"speed ratio with its build time (one run): "
          f"{(t_theirs + compile_time) / t_ours:6.2f}x")

    whole, whole_cpu = [], []
    for seed in range(args.repeats):
        wall, cpu = _whole_command(args.n, args.until, seed + 1)
        whole.append(wall)
        whole_cpu.append(cpu)
    t_whole, c_whole = statistics.median(whole), statistics.median(whole_cpu)
    c_theirs = statistics.median(theirs_cpu)
    print(f"whole `crn ssa` process: {t_whole:8.3f} s wall, {c_whole:8.3f} s CPU (median)")
    print(f"{name} run alone: {t_theirs:8.3f} s wall, {c_theirs:8.3f} s CPU (median)")
    print(f"whole command vs its run alone: {t_theirs / t_whole:6.2f}x by wall time, "
          f"{c_theirs / c_whole:6.2f}x by CPU time (goal >= 1)")


def _cpu() -> float:
    """CPU seconds (user + system) of this process and its finished children."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def _whole_command(n: int, until: float, seed: int) -> tuple[float, float]:
    """Wall and CPU seconds of one ``crn ssa`` process (direct method, one run, one worker)."""
    root = Path(__file__).resolve().parent.parent
    env = dict(os.environ, PYTHONPATH=str(root) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    command = [sys.executable, "-m", "crn", "ssa", str(root / "models/approximate_majority.toml"),
               "--set", f"n={n}", "--set", "gap=0", "--runs", "1", "--engine", "direct",
               "--workers", "1", "--until", f"{until:g}", "--seed", str(seed)]
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(command, check=True, stdout=subprocess.DEVNULL, env=env)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


if __name__ == "__main__":
    main()
