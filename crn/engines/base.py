"""What every stochastic engine shares: its signature, its result, its horizon check, its cache.

An engine is a function ``engine(net, *, until, times=None, rng=None,
stop_at_consensus=False) -> Trajectory`` running one exact stochastic run of a
:class:`~crn.core.network.Network`; :data:`crn.engines.ENGINES` names them.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable, Hashable
from dataclasses import dataclass
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike

from crn.core.network import Network
from crn.core.outcome import RunOutcome

__all__ = ["Trajectory", "Engine", "check_horizon", "NetworkCache", "DEFAULT_SAMPLES"]

DEFAULT_SAMPLES = 101
"""Sample times an engine records when none are given: evenly spaced from 0 to the horizon."""

# A last sample time this close above the horizon (relative) counts as the horizon itself:
# sample grids built by adding steps land there by rounding.
_HORIZON_SLACK = 1e-12


@dataclass(frozen=True)
class Trajectory:
    """One stochastic run.

    Attributes
    ----------
    times : ndarray of float64, shape (n_times,)
        The requested sample times (network time = parallel time for protocols).
    counts : ndarray of int64, shape (n_times, n_species)
        Counts at each sample time; after the run stopped (silence) the last
        state is repeated.
    outcome : RunOutcome
        First consensus (label, time), final label, whether it held.
    events : int
        Reactions fired (non-null interactions).
    end_time : float
        Time the run stopped: the horizon, or the time it fell silent.
    status : str
        ``"silent"`` (no reaction possible), ``"horizon"`` or ``"consensus"``
        (stopped at the first consensus on request).
    """

    times: np.ndarray
    counts: np.ndarray
    outcome: RunOutcome
    events: int
    end_time: float
    status: str


class Engine(Protocol):
    """The signature every engine has (extra keyword options may follow, with defaults)."""

    def __call__(self, net: Network, *, until: float, times: ArrayLike | None = None,
                 rng=None, stop_at_consensus: bool = False) -> Trajectory:
        """One exact stochastic run of ``net`` up to ``until``, sampled at ``times``."""


def check_horizon(until: float, times: ArrayLike | None = None, *, infinite: bool = False,
                  increasing: bool = False) -> tuple[float, np.ndarray]:
    """Validate an engine's horizon and sample times; fill in the default samples.

    Parameters
    ----------
    until : float
        Horizon in network time; positive, and finite unless ``infinite``.
    times : array_like of float, optional
        Sample times within ``[0, until]``, non-decreasing (strictly increasing
        with ``increasing``). Default :data:`DEFAULT_SAMPLES` evenly spaced
        points from 0 to ``until`` (none for an infinite horizon).
    infinite : bool, default False
        Whether the engine can run without a horizon (until consensus or silence).
    increasing : bool, default False
        Refuse repeated sample times.

    Returns
    -------
    until : float
    times : ndarray of float64, shape (n_times,), C-contiguous

    Raises
    ------
    ValueError
        For a NaN, non-positive or (unless allowed) infinite ``until``, or
        sample times that are not finite, ordered and within ``[0, until]``.

    Examples
    --------
    >>> until, times = check_horizon(10)
    >>> until, times[:3]
    (10.0, array([0. , 0.1, 0.2]))
    """
    until = float(until)
    if math.isnan(until) or until <= 0 or (math.isinf(until) and not infinite):
        kind = "positive" if infinite else "positive finite"
        raise ValueError(f"`until` must be a {kind} time, got {until}")
    if times is None:
        times = (np.linspace(0.0, until, DEFAULT_SAMPLES) if math.isfinite(until)
                 else np.zeros(0))
    times = np.ascontiguousarray(times, dtype=np.float64).reshape(-1)
    if times.size:
        steps = np.diff(times)
        ordered = (steps > 0).all() if increasing else (steps >= 0).all()
        if not (ordered and np.isfinite(times).all() and times[0] >= 0
                and times[-1] <= until * (1 + _HORIZON_SLACK)):
            rule = "increasing" if increasing else "non-decreasing"
            raise ValueError(f"`times` must be finite, {rule} and within [0, until]")
    return until, times


class NetworkCache:
    """What an engine builds once per network (kernel tables, a compiled solver), kept for reuse.

    Networks are immutable, so by default an entry is keyed by the network
    object itself (held, so its identity cannot be reused while cached); a
    ``key`` function keys by content instead, for things worth sharing between
    equal networks built separately. The oldest entry goes first once
    ``size`` are held. Lookups are thread-safe, and a build runs at most once
    per key at a time.

    Parameters
    ----------
    build : callable(net, *extra) -> object
    size : int, default 16
    key : callable(net, *extra) -> hashable, optional
        Default: the network's identity (``extra`` must then not change what is built).

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> tables = NetworkCache(lambda net: net.n_reactions)
    >>> net = load_model("models/epidemic.toml", {"n": 10}).network
    >>> tables(net), len(tables)
    (1, 1)
    """

    def __init__(self, build: Callable[..., object], *, size: int = 16,
                 key: Callable[..., Hashable] | None = None):
        self.build = build
        self.size = int(size)
        self.key = key
        self._entries: dict[Hashable, tuple[Network, object]] = {}
        self._lock = threading.RLock()

    def __call__(self, net: Network, *extra):
        """The cached value for ``net`` (built now if missing)."""
        key = id(net) if self.key is None else self.key(net, *extra)
        with self._lock:
            hit = self._entries.get(key)
            if hit is not None and (self.key is not None or hit[0] is net):
                return hit[1]
            value = self.build(net, *extra)
            while len(self._entries) >= self.size:
                self._entries.pop(next(iter(self._entries)))
            self._entries[key] = (net, value)
            return value

    def __len__(self) -> int:
        return len(self._entries)

    def clear(self) -> None:
        """Forget every entry."""
        with self._lock:
            self._entries.clear()
