"""Helpers for tests that run ``crn`` in a subprocess and send it signals."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def start(args, cwd=None, env=None) -> subprocess.Popen:
    """``python -m crn ARGS`` with this checkout first on the path."""
    full_env = {**os.environ, "PYTHONPATH": str(ROOT), **(env or {})}
    return subprocess.Popen([sys.executable, "-m", "crn", *map(str, args)], cwd=cwd or ROOT,
                            env=full_env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)


def descendants(pid: int) -> set[int]:
    """Live (non-zombie) processes below ``pid``, from the process table in /proc."""
    parent_of = {}
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        fields = stat.rsplit(")", 1)[1].split()
        if fields[0] != "Z":
            parent_of[int(entry.name)] = int(fields[1])
    found, frontier = set(), {pid}
    while frontier:
        frontier = {p for p, parent in parent_of.items() if parent in frontier} - found
        found |= frontier
    return found


def alive(pid: int) -> bool:
    """Whether ``pid`` exists and is not a zombie."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] != "Z"


def wait_for(condition, timeout: float, step: float = 0.05) -> bool:
    """Poll ``condition()`` until it is true or ``timeout`` seconds pass."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if condition():
            return True
        time.sleep(step)
    return bool(condition())


def stop(process: subprocess.Popen, signum: int, timeout: float = 30.0):
    """Send ``signum``; return (exit status, seconds from the signal to the exit, out, err)."""
    sent = time.monotonic()
    process.send_signal(signum)
    try:
        process.wait(timeout=timeout)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()
        raise AssertionError(f"still running {timeout} s after signal {signum}") from None
    elapsed = time.monotonic() - sent
    out, err = process.communicate()
    return process.returncode, elapsed, out, err


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of ``pid`` so far (0 when it is gone)."""
    import os

    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return 0.0
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
