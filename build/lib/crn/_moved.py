"""Old flat module paths (``crn.generate``, ``crn.errors``, ...) kept for one release.

The modules moved into the layer subpackages in 0.2; model files and scripts
written against 0.1 still import them by their old names. A finder on
``sys.meta_path`` maps an old name to the module's new home (the same module
object, so ``isinstance`` checks keep holding) with a :class:`FutureWarning`.
"""

from __future__ import annotations

import importlib
import importlib.abc
import importlib.util
import sys
import warnings

#: Old module name (under ``crn``) -> layer it moved into.
MOVED = {
    **dict.fromkeys(["expr", "protocol", "network", "translate", "model", "outcome",
                     "consensus", "units", "stats", "errors", "generate", "equations",
                     "loading"], "core"),
    **dict.fromkeys(["ode", "fixed_points", "exact", "configurations", "simulate",
                     "time_course"], "solvers"),
    **dict.fromkeys(["probes", "regimes", "copies", "verify", "inspection",
                     "design_questions", "implemented"], "analyses"),
    **dict.fromkeys(["guards", "interrupts", "workers"], "runtime"),
}


class _Alias(importlib.abc.Loader):
    def __init__(self, target: str):
        self.target = target

    def create_module(self, spec):
        return importlib.import_module(self.target)

    def exec_module(self, module):
        pass


class MovedModuleFinder(importlib.abc.MetaPathFinder):
    """Resolve ``crn.<old>`` to ``crn.<layer>.<old>`` with a warning."""

    def find_spec(self, fullname, path=None, target=None):
        package, _, name = fullname.partition(".")
        if package != "crn" or name not in MOVED:
            return None
        new = f"crn.{MOVED[name]}.{name}"
        warnings.warn(f"{fullname} moved to {new}; the old name goes in the next release",
                      FutureWarning, stacklevel=2)
        return importlib.util.spec_from_loader(fullname, _Alias(new))


def install() -> None:
    """Put the finder first on ``sys.meta_path``, once (before any editable-install finder)."""
    if not any(isinstance(f, MovedModuleFinder) for f in sys.meta_path):
        sys.meta_path.insert(0, MovedModuleFinder())
