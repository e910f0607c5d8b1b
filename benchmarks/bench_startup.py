"""Start-up time of the command line: ``crn --version``, ``crn --help``, ``crn translate``.

Each command runs in a fresh process (what a user waits for), several times; the
median wall time is printed beside the same interpreter doing nothing and
importing numpy, the references measured in the same run. Goals: --version and
--help under 0.3 s, translate of a small model under 0.6 s. Run:
    .venv/bin/python benchmarks/bench_startup.py [--repeats R]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
MODEL = ROOT / "models" / "approximate_majority.toml"

CASES = [
    ("python (nothing)", [sys.executable, "-c", "pass"]),
    ("python -c 'import numpy'", [sys.executable, "-c", "import numpy"]),
    ("crn --version", [sys.executable, "-m", "crn", "--version"]),
    ("crn --help", [sys.executable, "-m", "crn", "--help"]),
    ("crn translate (small model)", [sys.executable, "-m", "crn", "translate", str(MODEL)]),
    ("crn translate --to json", [sys.executable, "-m", "crn", "translate", str(MODEL),
                                 "--to", "json"]),
]
GOALS = {"crn --version": 0.3, "crn --help": 0.3, "crn translate (small model)": 0.6}


def wall_time(command: list[str], repeats: int) -> float:
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        subprocess.run(command, check=True, stdout=subprocess.DEVNULL, env=env, cwd=ROOT)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    results = {name: wall_time(command, args.repeats) for name, command in CASES}
    bare = results["python (nothing)"]
    print(f"median of {args.repeats} fresh processes each")
    print(f"{'command':<30} {'seconds':>8} {'x bare python':>14} {'goal':>8}")
    for name, seconds in results.items():
        goal = GOALS.get(name)
        verdict = "" if goal is None else f"< {goal:g} s " + ("ok" if seconds < goal else "MISSED")
        print(f"{name:<30} {seconds:8.3f} {seconds / bare:14.2f}   {verdict}")


if __name__ == "__main__":
    main()
