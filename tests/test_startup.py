"""Start-up stays light: the command line imports no heavy library until a command needs it.

Each check runs in a fresh interpreter, since this test process has long imported them.
The time it saves is measured in benchmarks/bench_startup.py, not asserted here.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
MODEL = ROOT / "models" / "approximate_majority.toml"
HEAVY = ("numba", "scipy", "sympy", "matplotlib", "dask", "distributed", "libsbml", "gillespy2",
         "rich", "llvmlite")

PROBE = """
import json, sys
{code}
print(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}})))
"""


def loaded_after(code: str) -> set[str]:
    """Top-level packages in ``sys.modules`` after running ``code`` in a fresh interpreter."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    done = subprocess.run([sys.executable, "-c", PROBE.format(code=code)], cwd=ROOT, env=env,
                          capture_output=True, text=True, check=True)
    return set(json.loads(done.stdout.splitlines()[-1]))


def test_importing_the_command_line_loads_no_heavy_library():
    loaded = loaded_after("import crn.cli")
    assert "click" in loaded  # the probe does see what the import loaded
    assert loaded.isdisjoint(HEAVY), sorted(loaded & set(HEAVY))
    assert "numpy" not in loaded


@pytest.mark.parametrize("argv", [["--version"], ["--help"], ["ssa", "--help"],
                                  ["regimes", "--help"]])
def test_help_and_version_load_no_heavy_library(argv):
    code = ("import contextlib, io\nfrom crn.cli import main\n"
            f"with contextlib.redirect_stdout(io.StringIO()):\n    assert main({argv!r}) == 0")
    loaded = loaded_after(code)
    assert loaded.isdisjoint(HEAVY), sorted(loaded & set(HEAVY))
    assert "numpy" not in loaded


def test_translate_loads_numpy_only():
    code = ("import contextlib, io\nfrom crn.cli import main\n"
            f"with contextlib.redirect_stdout(io.StringIO()):\n"
            f"    assert main(['translate', {str(MODEL)!r}]) == 0")
    loaded = loaded_after(code)
    assert "numpy" in loaded
    assert loaded.isdisjoint(HEAVY), sorted(loaded & set(HEAVY))


def test_import_crn_is_light_and_names_load_on_use():
    loaded = loaded_after("import crn\nassert crn.Network.__name__ == 'Network'\n"
                          "assert crn.CRNError.__module__ == 'crn.core.errors'")
    assert loaded.isdisjoint(HEAVY), sorted(loaded & set(HEAVY))


def test_choices_kept_for_start_up_match_the_library():
    from crn.commands.copies import LOADINGS as cli_loadings
    from crn.commands.ode import METHODS as cli_methods
    from crn.commands.translate import FORMATS as cli_formats
    from crn.core.loading import LOADINGS
    from crn.engines import ENGINES
    from crn.io.exports import FORMATS
    from crn.solvers.ode import METHODS
    from crn.solvers.simulate import ENGINES as simulate_engines

    assert tuple(cli_methods) == tuple(METHODS)
    assert tuple(cli_formats) == tuple(FORMATS)
    assert tuple(cli_loadings) == tuple(LOADINGS)
    assert simulate_engines is ENGINES


def test_consensus_kernels_are_the_ones_outcome_names():
    import crn.core.consensus
    import crn.core.outcome

    assert crn.core.outcome.consensus_index is crn.core.consensus.consensus_index
    core = crn.core
    assert core.outcome.mean_field_consensus_index is core.consensus.mean_field_consensus_index


def test_a_short_ssa_run_needs_neither_scipy_stats_nor_sparse():
    code = ("import contextlib, io, sys\nfrom crn.cli import main\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            f"    assert main(['ssa', {str(MODEL)!r}, '--set', 'n=200', '--runs', '2', "
            "'--engine', 'direct', '--workers', '1', '--seed', '1']) == 0\n"
            "print(sorted(m for m in sys.modules if m.startswith('scipy.')), file=sys.stderr)\n"
            "assert 'scipy.stats' not in sys.modules and 'scipy.sparse' not in sys.modules\n"
            "assert 'sympy' not in sys.modules and 'matplotlib' not in sys.modules")
    loaded = loaded_after(code)
    assert "numba" in loaded  # the run did happen in compiled code
