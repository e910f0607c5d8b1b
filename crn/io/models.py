"""Open model files: TOML tables (parsed safely) and trusted Python files."""

from __future__ import annotations

import contextlib
import runpy
import signal
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING

from crn.core.errors import CRNError, ModelError
from crn.core.model import Model, parse_model
from crn.core.network import Network
from crn.core.protocol import Protocol
from crn.core.translate import protocol_to_network

if TYPE_CHECKING:
    from os import PathLike

__all__ = ["load_model", "MAX_MODEL_BYTES", "PYTHON_MODEL_TIMEOUT"]

MAX_MODEL_BYTES = 64 * 2**20
"""Model files above this size are refused before they are read (the largest published
SBML models are a few MB)."""

PYTHON_MODEL_TIMEOUT = 60.0
"""Seconds a Python model file may take to run and build its network."""


def load_model(path: str | PathLike, overrides: Mapping[str, float] | None = None) -> Model:
    """Load a model file.

    Parameters
    ----------
    path : str or Path
        A ``.toml`` model (docs/design.md format, never runs code), a network
        exported as ``.json`` (the contract object) or SBML (``.xml``,
        ``.sbml``), or a ``.py`` model. A Python model file is ordinary
        trusted Python: it is run, so load only files you trust. It defines
        ``PARAMETERS`` (a dict of defaults, optional) and ``build(parameters)`` returning a
        :class:`~crn.core.protocol.Protocol` or a :class:`~crn.core.network.Network`
        (see :func:`crn.core.generate.protocol_from_rule`).
    overrides : mapping of str to number, optional
        Parameter values replacing the file's (``--set``).

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        When the file is missing, unreadable or invalid.

    Examples
    --------
    >>> model = load_model("models/approximate_majority.toml", {"n": 20, "gap": 4})
    >>> model.name, model.kind
    ('three-state approximate majority', 'protocol')
    >>> net = model.network
    >>> net.species, net.initial.tolist(), net.majority
    (('X', 'Y', 'B'), [12, 8, 0], ('X', 'Y'))
    """
    path = Path(path)
    if not path.is_file():
        raise ModelError("no such model file", file=path)
    try:
        size = path.stat().st_size
        if size > MAX_MODEL_BYTES:
            raise ModelError(f"the file has {size / 2**20:,.0f} MiB, more than a model file "
                             f"may have ({MAX_MODEL_BYTES // 2**20} MiB)", file=path)
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise ModelError(f"cannot read the file: {err}", file=path) from err
    if path.suffix == ".py":
        return _load_python(path, overrides or {})
    if path.suffix in (".json", ".xml", ".sbml"):
        return _load_network(path, text, overrides or {})
    return parse_model(text, source=str(path), overrides=overrides)


def _load_network(path: Path, text: str, overrides) -> Model:
    """A network exported as JSON (the contract object) or SBML; it has no parameters."""
    from crn.io.contract import network_from_json
    from crn.io.sbml import network_from_sbml

    if overrides:
        raise ModelError(f"--set names unknown parameter {next(iter(overrides))!r} "
                         "(parameters: none)", file=path, field="--set")
    if path.suffix != ".json" and "<!entity" in text.lower():
        # entity declarations can expand without bound ("billion laughs"); SBML needs none
        raise ModelError("XML entity declarations (<!ENTITY ...>) are not accepted in SBML",
                         file=path)
    reader = network_from_json if path.suffix == ".json" else network_from_sbml
    net = reader(text, source=str(path))
    return Model(net.name, net.about, str(path), {}, net)


class _TimedOut(BaseException):
    """Raised into a Python model that runs past PYTHON_MODEL_TIMEOUT."""


@contextlib.contextmanager
def _time_limit(path: Path, seconds: float):
    """Stop the block after ``seconds`` (main thread only; elsewhere no limit)."""
    def expire(signum, frame):
        raise _TimedOut

    try:
        previous = signal.signal(signal.SIGALRM, expire)
    except ValueError:  # not the main thread
        yield
        return
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    except _TimedOut as err:
        raise ModelError(f"the Python model did not finish within {seconds:g} s (an endless "
                         "loop?); it was stopped", file=path) from err
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def _own_interrupt(err: BaseException) -> bool:
    """A KeyboardInterrupt the model raised itself (no Ctrl-C or SIGTERM arrived)."""
    from crn.runtime import interrupts

    return isinstance(err, KeyboardInterrupt) and interrupts.received() is None


def _load_python(path: Path, overrides) -> Model:
    with _time_limit(path, PYTHON_MODEL_TIMEOUT):
        return _run_python(path, overrides)


def _run_python(path: Path, overrides) -> Model:
    try:
        namespace = runpy.run_path(str(path))
    except (Exception, SystemExit, KeyboardInterrupt) as err:
        # a trusted file: report what it raised, in one line
        if isinstance(err, KeyboardInterrupt) and not _own_interrupt(err):
            raise
        raise ModelError(f"running the Python model failed: {type(err).__name__}: {err}",
                         file=path) from err
    build = namespace.get("build")
    if not callable(build):
        raise ModelError("a Python model defines build(parameters)", file=path, field="build")
    defaults = namespace.get("PARAMETERS", {})
    if not isinstance(defaults, Mapping):
        raise ModelError(f"PARAMETERS must be a dict of names to numbers, got "
                         f"{type(defaults).__name__}", file=path, field="PARAMETERS")
    params = dict(defaults)
    for key, value in overrides.items():
        if key not in params:
            raise ModelError(f"--set names unknown parameter {key!r} "
                             f"(parameters: {', '.join(params) or 'none'})", file=path,
                             field=f"PARAMETERS.{key}")
        params[key] = value
    try:
        built = build(params)
    except CRNError as err:
        if isinstance(err, ModelError):
            raise err.located(file=path) from err
        raise ModelError(str(err), file=path) from err
    except Exception as err:
        raise ModelError(f"build() failed: {type(err).__name__}: {err}", file=path) from err
    if isinstance(built, Protocol):
        return Model(built.name, built.about, str(path), params, protocol_to_network(built), built)
    if isinstance(built, Network):
        return Model(built.name, built.about, str(path), params, built)
    raise ModelError(f"build() must return a Protocol or a Network, got {type(built).__name__}",
                     file=path, field="build")
