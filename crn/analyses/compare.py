"""The mean-field ODE beside the exact stochastic runs of the same network.

:func:`mean_field_window` solves the ODE once, to the horizon: the first
consensus comes from that solve and the curves are read off its continuous
solution on the sampled window (twice the ODE's consensus time). The runs are
sampled on the same times; :func:`compare_runs` puts them beside the ODE, and
:func:`compare_network` does both. :func:`mean_field_windows` does the same
for several networks shown together (a formal network and its DNA
implementation): one solve each, all sampled on one window.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from crn.core.stats import wilson_interval

if TYPE_CHECKING:
    from collections.abc import Callable, Sequence

    from crn.core.network import Network
    from crn.core.outcome import RunOutcome
    from crn.core.types import SeedLike
    from crn.solvers.ode import MeanFieldResult
    from crn.solvers.simulate import Ensemble

__all__ = ["Comparison", "MeanFieldWindow", "compare_network", "compare_runs", "compare_window",
           "disagreement", "mean_field_window", "mean_field_windows", "SAMPLES",
           "WINDOW_FACTOR"]

#: The sampled window is this many times the ODE's consensus time (capped at the horizon).
WINDOW_FACTOR = 2.0
#: Sample times on the window.
SAMPLES = 201


def compare_window(ode_time: float | None, until: float) -> float:
    """The sampled time window: twice the ODE's consensus time, capped at the horizon.

    Parameters
    ----------
    ode_time : float or None
        The ODE's consensus time (None: no consensus by the horizon).
    until : float
        The horizon; the runs go on to it whatever the window.

    Returns
    -------
    float
        The whole horizon when the ODE reaches no consensus (or at time 0).
    """
    if ode_time is None or not ode_time > 0:
        return until
    return min(until, WINDOW_FACTOR * ode_time)


def disagreement(labels: Sequence[str | None],
                 ode_label: str | None) -> tuple[float, float, float]:
    """How often a run's first-consensus label differs from the ODE's label.

    Parameters
    ----------
    labels : sequence of str or None
        First-consensus label of each run; a run without consensus differs.
    ode_label : str or None

    Returns
    -------
    (p, low, high) : tuple of float
        The share of runs that differ and its 95% Wilson interval.
    """
    differ = sum(1 for label in labels if label is None or label != ode_label)
    return wilson_interval(differ, len(labels))


@dataclass(frozen=True)
class MeanFieldWindow:
    """The ODE a comparison shows.

    Attributes
    ----------
    horizon : float
        Where the runs stop.
    consensus : crn.core.outcome.RunOutcome
        The ODE's first consensus, as a solve stopping there reports it (the
        label held at that moment).
    ode : crn.solvers.ode.MeanFieldResult
        The solution at :attr:`times`, past the consensus (its ``consensus`` is
        :attr:`consensus`).
    at_stop : ndarray of float64, shape (n_species,)
        The state where a solve stopping at the first consensus ends: at the
        consensus, else at the end of the solve (the horizon); in the ODE's
        units (fractions or concentrations).
    """

    horizon: float
    consensus: RunOutcome
    ode: MeanFieldResult
    at_stop: np.ndarray

    @property
    def times(self) -> np.ndarray:
        """Sample times on the window, shape (SAMPLES,)."""
        return self.ode.times

    @property
    def window(self) -> float:
        """The last sample time."""
        return float(self.ode.times[-1])

    @property
    def counts_at_stop(self) -> np.ndarray:
        """:attr:`at_stop` in molecules (times the ODE's molecules per unit)."""
        return self.at_stop * float(self.ode.molecules_per_unit)


def mean_field_window(net: Network, until: float | None = None,
                      samples: int = SAMPLES) -> MeanFieldWindow:
    """Solve the mean-field ODE once and sample it on the comparison window.

    Parameters
    ----------
    net : Network
    until : float, optional
        Horizon; default :func:`crn.solvers.simulate.default_horizon` (that of the runs).
    samples : int, default SAMPLES
        Equally spaced sample times from 0 to the window's end.

    Returns
    -------
    MeanFieldWindow
    """
    return mean_field_windows([net], until, samples)[0]


def mean_field_windows(nets: Sequence[Network], until: float | None = None,
                       samples: int = SAMPLES) -> list[MeanFieldWindow]:
    """Solve each network's mean-field ODE once and sample all on one window.

    The window is twice the latest of their consensus times (capped at the
    horizon; the whole horizon when none reaches consensus), so the curves of
    networks shown together (a formal network and its DNA implementation) share
    their time axis.

    Parameters
    ----------
    nets : sequence of Network
        In the same time unit.
    until : float, optional
        Horizon of every solve; default :func:`crn.solvers.simulate.default_horizon`
        of the first network.
    samples : int, default SAMPLES
        Equally spaced sample times from 0 to the window's end.

    Returns
    -------
    list of MeanFieldWindow
        One per network, in order.
    """
    from crn.solvers.simulate import default_horizon

    if not nets:
        raise ValueError("`nets` must name at least one network")
    horizon = default_horizon(nets[0]) if until is None else float(until)
    solved = [_solve_to_horizon(net, horizon) for net in nets]
    times_of = [consensus.time for _, consensus, _ in solved if consensus.time is not None]
    window = compare_window(max(times_of) if times_of else None, horizon)
    grid = np.linspace(0.0, window, samples)
    return [MeanFieldWindow(horizon=horizon, consensus=consensus,
                            ode=replace(result.sampled(grid), consensus=consensus,
                                        interpolant=None),
                            at_stop=at_stop)
            for result, consensus, at_stop in solved]


def _solve_to_horizon(net: Network, horizon: float):
    """One solve to the horizon with its continuous solution: the result, the first
    consensus as a solve stopping there reports it, and the state where that solve ends.
    """
    from crn.solvers.ode import initial_state, solve_mean_field

    result = solve_mean_field(net, until=horizon, stop_at_consensus=False, dense_output=True)
    consensus, time = result.consensus, result.consensus.time
    if consensus.label is None or time is None:
        at_stop = result.values[-1] if result.values.shape[0] else initial_state(net)
        return result, consensus, np.asarray(at_stop, dtype=np.float64)
    # what a solve stopping at the consensus reports: the label holds at that moment
    consensus = replace(consensus, final_label=consensus.label, held=True)
    if time == 0.0:
        at_stop = initial_state(net)
    else:
        at_stop = result.sampled(np.array([float(time)])).values[0]
    return result, consensus, np.asarray(at_stop, dtype=np.float64)


@dataclass(frozen=True)
class Comparison:
    """The ODE and the exact stochastic runs of one network, side by side.

    Attributes
    ----------
    mean_field : MeanFieldWindow
    ensemble : crn.solvers.simulate.Ensemble
        Runs to the horizon, sampled at the window's times.
    disagreement : (p, low, high)
        Share of runs whose first-consensus label differs from the ODE's (95%
        Wilson interval); see :func:`disagreement`.
    """

    mean_field: MeanFieldWindow
    ensemble: Ensemble
    disagreement: tuple

    @property
    def ode_label(self) -> str | None:
        """The ODE's consensus label (None: none by the horizon)."""
        return self.mean_field.consensus.label

    @property
    def ode_time(self) -> float | None:
        """The ODE's consensus time."""
        return self.mean_field.consensus.time

    def outcome_rows(self) -> list[dict]:
        """Each label the runs or the ODE reached, most frequent first, ``none`` last.

        Returns
        -------
        list of dict
            ``{label, ode, runs, p, low, high}``: ``ode`` tells whether it is the
            ODE's label; the interval is the 95% Wilson interval of the runs' share.
        """
        intervals = self.ensemble.outcome_intervals()
        labels = set(intervals) | ({self.ode_label} if self.ode_label is not None else set())
        counts = {label: intervals[label]["runs"] if label in intervals else 0
                  for label in labels}
        rows = []
        for label in sorted(labels, key=lambda s: (s == "none", -counts[s])):
            row = intervals.get(label)
            if row is None:
                p, low, high = wilson_interval(0, self.ensemble.runs)
                row = {"runs": 0, "p": p, "low": low, "high": high}
            rows.append({"label": label, "ode": label == self.ode_label, **row})
        return rows


def compare_runs(mean_field: MeanFieldWindow, ensemble: Ensemble) -> Comparison:
    """Put finished runs beside the ODE.

    Parameters
    ----------
    mean_field : MeanFieldWindow
    ensemble : crn.solvers.simulate.Ensemble
        Runs of the same network (a partial ensemble after an interruption is fine).

    Returns
    -------
    Comparison
    """
    return Comparison(mean_field=mean_field, ensemble=ensemble,
                      disagreement=disagreement(ensemble.labels, mean_field.consensus.label))


def compare_network(net: Network, *, runs: int = 100, until: float | None = None,
                    engine: str = "auto", rng: SeedLike = None, workers: int | None = None,
                    cluster: str | None = None,
                    progress: Callable[[int, int], None] | None = None) -> Comparison:
    """The mean-field ODE beside ``runs`` exact stochastic runs.

    Parameters
    ----------
    net : Network
    runs : int, default 100
    until : float, optional
        Horizon of the runs (and of the ODE solve); default
        :func:`crn.solvers.simulate.default_horizon`.
    engine, rng, workers, cluster, progress
        As :func:`crn.solvers.simulate.simulate`.

    Returns
    -------
    Comparison

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> net = load_model("models/approximate_majority.toml", {"n": 200, "gap": 40}).network
    >>> result = compare_network(net, runs=20, rng=1, workers=1)
    >>> result.ode_label, result.ensemble.runs
    ('X', 20)
    """
    from crn.solvers.simulate import simulate

    mean_field = mean_field_window(net, until)
    ensemble = simulate(net, runs=runs, until=mean_field.horizon, times=mean_field.times,
                        engine=engine, rng=rng, workers=workers, cluster=cluster,
                        progress=progress)
    return compare_runs(mean_field, ensemble)
