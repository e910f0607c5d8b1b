"""Stochastic engines: each runs one exact stochastic run and returns a :class:`Trajectory`.

:data:`ENGINES` is the registry :func:`crn.solvers.simulate.simulate` chooses
from. Its entries are callables with the one engine signature
(:class:`crn.engines.base.Engine`); each imports its module (numba, GillesPy2)
only when first called, so naming the engines costs nothing at start-up.

Adding an engine is one module in this package defining the function, plus one
line in :data:`ENGINES`.
"""

from __future__ import annotations

from importlib import import_module

from crn._lazy import lazy_exports

__all__ = ["ENGINES", "LazyEngine", "get_engine", "Trajectory", "Engine", "check_horizon",
           "NetworkCache"]


class LazyEngine:
    """An engine named by its module and function, imported on first call.

    Parameters
    ----------
    module : str
        Module defining the engine, e.g. ``"crn.engines.direct"``.
    function : str
        The engine function in it.

    Examples
    --------
    >>> ENGINES["direct"].function
    'run_direct'
    """

    def __init__(self, module: str, function: str):
        self.module = module
        self.function = function

    def load(self):
        """The engine function itself (imports its module).

        Raises
        ------
        ImportError
            When the module or a library it needs is not installed.
        """
        try:
            return getattr(import_module(self.module), self.function)
        except AttributeError as err:
            raise ImportError(f"{self.module} defines no engine {self.function!r}") from err

    def __call__(self, net, *, until, times=None, rng=None, stop_at_consensus=False, **options):
        """Run the engine (see :class:`crn.engines.base.Engine`)."""
        return self.load()(net, until=until, times=times, rng=rng,
                           stop_at_consensus=stop_at_consensus, **options)

    def __repr__(self) -> str:
        return f"LazyEngine({self.module!r}, {self.function!r})"


#: Engine name -> engine. One line per engine; the first is the general-purpose default.
ENGINES: dict[str, LazyEngine] = {
    "direct": LazyEngine("crn.engines.direct", "run_direct"),
    "batched": LazyEngine("crn.engines.batched", "run_batched"),
    "reduced": LazyEngine("crn.engines.reduced", "run_reduced"),
    "reference": LazyEngine("crn.engines.gillespy2_bridge", "run_reference"),
}


def get_engine(name: str):
    """The engine function registered as ``name`` (its module imported now).

    Raises
    ------
    KeyError
        For a name not in :data:`ENGINES`.
    ImportError
        When the engine's module cannot be imported here.
    """
    return ENGINES[name].load()


_HOME = {"Trajectory": "base", "Engine": "base", "check_horizon": "base",
         "NetworkCache": "base"}


__getattr__, __dir__ = lazy_exports(__name__, _HOME)
