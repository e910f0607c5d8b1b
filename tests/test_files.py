"""Every file ``crn`` writes respects the umask, appears whole or not at all, and no
temporary file is left in the target folder on any exit path (README, "Reliability")."""

import os
import signal
import stat

import pytest
from click.testing import CliRunner
from proc_tools import start

import crn.io.atomic as atomic
from crn.cli import cli
from crn.io.atomic import TEMP_MARK, atomic_path, write_atomic

AM = "models/approximate_majority.toml"
SMALL = ["--set", "n=60", "--set", "gap=4"]


@pytest.fixture
def umask():
    previous = os.umask(0o022)
    yield os.umask
    os.umask(previous)


def write_everything(folder):
    """Every kind of output file: CSV, JSON tables, figures, exports, sweep stores."""
    runner = CliRunner()
    commands = [
        ["ssa", AM, *SMALL, "--runs", "6", "--seed", "1", "--workers", "1", "--csv",
         folder / "runs.csv"],
        ["ode", AM, *SMALL, "--csv", folder / "ode.csv", "--plot", folder / "ode.png"],
        ["regimes", AM, "--n", "40", "--gaps", "4", "--runs-max", "50", "--seed", "1",
         "--csv", folder / "map.csv", "--plot", folder / "map.svg", "--out", folder / "sweep"],
        ["translate", AM, *SMALL, "--to", "sbml", "-o", folder / "am.xml"],
        ["translate", AM, *SMALL, "--to", "json", "-o", folder / "am.json"],
    ]
    for args in commands:
        result = runner.invoke(cli, [str(a) for a in args], catch_exceptions=False)
        assert result.exit_code == 0, result.output
    return sorted(p for p in folder.rglob("*") if p.is_file())


@pytest.mark.parametrize("mask, mode", [(0o022, 0o644), (0o077, 0o600), (0o002, 0o664)])
def test_every_written_file_gets_the_umask_mode(tmp_path, umask, mask, mode):
    umask(mask)
    files = write_everything(tmp_path)
    names = {p.relative_to(tmp_path).as_posix() for p in files}
    assert names == {"runs.csv", "ode.csv", "ode.png", "map.csv", "map.svg", "am.xml",
                     "am.json", "sweep/regimes.jsonl", "sweep/regimes.csv",
                     "sweep/regimes.json"}
    for path in files:
        assert stat.S_IMODE(path.stat().st_mode) == mode, path


def test_replacing_a_file_is_whole_and_leaves_nothing(tmp_path, umask):
    target = tmp_path / "table.csv"
    write_atomic(target, "old\n")
    write_atomic(target, b"new\n")
    assert target.read_bytes() == b"new\n"
    assert os.listdir(tmp_path) == ["table.csv"]


def test_an_error_while_writing_keeps_the_old_file(tmp_path, umask):
    target = tmp_path / "table.csv"
    write_atomic(target, "old\n")
    for opener in (atomic.atomic_open, atomic_path):
        with pytest.raises(RuntimeError), opener(target) as handle:
            if isinstance(handle, os.PathLike):
                handle.write_text("half")
            else:
                handle.write("half")
            raise RuntimeError("disk on fire")
        assert target.read_text() == "old\n" and os.listdir(tmp_path) == ["table.csv"]


def test_named_temporary_files_of_killed_processes_are_swept(tmp_path, umask, monkeypatch):
    # where the file system has no anonymous files a named temporary is used; one left by a
    # killed process (its pid is gone) is removed by the next write of the same file
    monkeypatch.setattr(atomic, "_ANONYMOUS", False)
    dead = 2**22 + 17  # above the kernel's default pid_max: no such process
    stale = tmp_path / f".table.csv{TEMP_MARK}{dead}-deadbeef"
    stale.write_text("half")
    write_atomic(tmp_path / "table.csv", "whole\n")
    assert os.listdir(tmp_path) == ["table.csv"]
    assert stat.S_IMODE((tmp_path / "table.csv").stat().st_mode) == 0o644


@pytest.mark.parametrize("signum, status", [(signal.SIGKILL, -9), (signal.SIGINT, 130),
                                            (signal.SIGTERM, 143)])
def test_a_kill_between_write_and_rename_leaves_the_old_file_and_no_temporary(tmp_path, signum,
                                                                              status):
    target = tmp_path / "runs.csv"
    target.write_text("previous results\n")
    process = start(["ssa", AM, *SMALL, "--runs", "4", "--seed", "1", "--workers", "1",
                     "--csv", target], env={atomic.PAUSE_HOOK: "60"})
    try:
        for line in process.stderr:  # the new content is written, not yet renamed
            if line.startswith("crn-test: written"):
                break
        else:
            pytest.fail(f"the command ended first: {process.communicate()}")
        process.send_signal(signum)
        process.wait(timeout=30)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    assert process.returncode == status
    assert target.read_text() == "previous results\n"
    assert os.listdir(tmp_path) == ["runs.csv"]
