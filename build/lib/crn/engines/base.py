"""What every stochastic engine returns for one run."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from crn.core.outcome import RunOutcome

__all__ = ["Trajectory"]


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
