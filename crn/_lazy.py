"""Lazy exports: a package names its public objects, a module is imported on first use."""

from __future__ import annotations

import sys
from collections.abc import Callable, Mapping
from importlib import import_module


def lazy_exports(package: str, home: Mapping[str, str]
                 ) -> tuple[Callable[[str], object], Callable[[], list[str]]]:
    """The module-level ``__getattr__`` and ``__dir__`` of a package with lazy exports.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    home : mapping of str to str
        Public name -> module (relative to the package) that defines it.

    Returns
    -------
    (callable, callable)
        ``__getattr__`` imports the defining module on first use and caches the
        object on the package; ``__dir__`` lists loaded and exported names.
    """
    def __getattr__(name: str) -> object:
        where = home.get(name)
        if where is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(import_module(f".{where}", package), name)
        setattr(sys.modules[package], name, value)
        return value

    def __dir__() -> list[str]:
        return sorted(set(vars(sys.modules[package])) | set(home))

    return __getattr__, __dir__
