"""Running the analyses on a DNA implementation instead of the formal network.

Every analysis (mean field, stochastic runs, exact chains, regime maps, copy
numbers) takes a network, or a builder ``(n, gap) -> Network`` for the cells of
a sweep. :class:`ImplementedCells` wraps a formal builder so that each cell's
formal network is implemented in DNA (:func:`crn.dna.implement`) and the
analysis runs on the implementation network: same volume convention and same
time unit as the formal run (parallel time for a protocol), decisions read from
the signal species and the intermediates that stand for them (the rule of
:mod:`crn.dna.labels`, the same that ``crn implement`` prints; fuel, waste and
released strands are ignored).

The helpers here also say how much fuel is left at the end of a run and why an
implementation fails to decide where its formal network decides (fuel runs
out, leak dominates).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from crn.core.network import Network
from crn.core.units import AVOGADRO
from crn.dna.labels import held_matrix

if TYPE_CHECKING:
    from crn.analyses.compare import MeanFieldWindow
    from crn.dna.implementation import Implementation
    from crn.dna.parameters import DnaParameters
    from crn.solvers.ode import MeanFieldResult
    from crn.solvers.simulate import Ensemble
    from crn.solvers.time_course import TimeCourse

__all__ = ["ImplementedCells", "implementation_of", "decision_network", "held_labels",
           "held_matrix",
           "fuel_left_ode", "fuel_left_runs", "fuel_left_at_horizon", "fuel_left_at_decision",
           "formal_horizon", "Diagnosis", "diagnose", "FUEL_OUT"]

#: A fuel species with less than this fraction left counts as run out.
FUEL_OUT = 0.05


def held_labels(impl: Implementation) -> dict[str, int]:
    """Label index each intermediate species reports (the rule of :mod:`crn.dna.labels`).

    Parameters
    ----------
    impl : crn.dna.Implementation

    Returns
    -------
    dict of str to int
        Intermediate species -> label index (into ``impl.network.labels``), -1
        for none, :data:`crn.core.network.IGNORED` when ignored.
    """
    net = impl.network
    return {s: int(net.species_label[net.index[s]])
            for s, role in impl.roles.items() if role == "intermediate"}


def decision_network(impl: Implementation) -> Network:
    """The network every analysis runs on: ``impl.network``, labelled when it was built.

    Decisions are read from the signal species and from the signals the gates
    hold (:func:`crn.dna.labels.decision_labels`), so a minority molecule
    momentarily inside a gate does not let a run reach a false consensus.
    """
    return impl.network


def implementation_of(formal: Network, scheme: str, params: DnaParameters) -> Implementation:
    """Implement one formal network in DNA (:func:`crn.dna.implement`), for analysis.

    Parameters
    ----------
    formal : Network
    scheme : str
        A key of :data:`crn.dna.SCHEMES`.
    params : crn.dna.DnaParameters

    Returns
    -------
    crn.dna.Implementation
    """
    from crn.dna import implement

    return implement(formal, scheme, params)


@dataclass(frozen=True)
class ImplementedCells:
    """Cell builder ``(n, gap) -> Network``: each cell's formal network implemented in DNA.

    Picklable (for worker processes) when ``formal`` is, as
    :class:`crn.analyses.probes.InitialSplit` and :class:`crn.analyses.probes.ModelParameters` are.

    Attributes
    ----------
    formal : callable (n, gap) -> Network
        Builder of the formal cell networks.
    scheme : str
    params : crn.dna.DnaParameters
        The signal concentration C the formal population stands for, the
        physical rate of one unit of formal rate, fuel, q_max and leak.
    volume_liters : float, optional
        A fixed droplet volume: the signal concentration of cell n is then
        ``n / (V N_A)`` instead of ``params.concentration`` (fuel given in M
        stays as given; the default fuel follows C).
    full_network : bool, default False
        Run the stochastic cells on the full implementation network. By
        default a cell whose implementation has a reduced model
        (:mod:`crn.dna.reduced`: the fast reversible binding at quasi-steady
        state, used where the fuel excess makes it valid) runs its stochastic
        runs on that model; :meth:`stochastic_model` says which one a cell uses.
    """

    formal: Callable[[int, int], Network]
    scheme: str
    params: DnaParameters
    volume_liters: float | None = None
    full_network: bool = False

    def params_for(self, n: int) -> DnaParameters:
        """The DNA parameters of the cell with n agents."""
        if self.volume_liters is None:
            return self.params
        return dataclasses.replace(self.params,
                                   concentration=int(n) / (self.volume_liters * AVOGADRO))

    def implementation(self, n: int, gap: int) -> Implementation:
        """The :class:`crn.dna.Implementation` of cell (n, gap)."""
        return implementation_of(self.formal(int(n), int(gap)), self.scheme, self.params_for(n))

    def __call__(self, n: int, gap: int) -> Network:
        """The implementation's network of cell ``(n, gap)`` (the reduced model when valid)."""
        impl = self.implementation(n, gap)
        if self.full_network:
            return impl.network
        from crn.dna.reduced import reduced_network

        reduced = reduced_network(impl)
        return impl.network if isinstance(reduced, str) else reduced

    def stochastic_model(self, n: int, gap: int) -> tuple[str, str]:
        """Which network the stochastic runs of cell (n, gap) use, and why.

        Returns
        -------
        model : str
            ``reduced`` (the quasi-steady-state model of :mod:`crn.dna.reduced`)
            or ``full`` (the whole implementation network).
        reason : str
            Empty for the reduced model; else ``asked for`` (``full_network``)
            or why the implementation has no valid reduced model.
        """
        if self.full_network:
            return "full", "asked for"
        from crn.dna.reduced import reduction_of

        reduction = reduction_of(self.implementation(n, gap))
        return ("full", reduction) if isinstance(reduction, str) else ("reduced", "")

    def stochastic_models(self, cells: Iterable[tuple[int, int]]) -> dict:
        """:meth:`stochastic_model` over cells, for an output: ``{"reduced": [[n, gap], ...],
        "full": [{"n", "gap", "reason"}, ...]}``.
        """
        out: dict = {"reduced": [], "full": []}
        for n, gap in cells:
            model, reason = self.stochastic_model(n, gap)
            if model == "reduced":
                out["reduced"].append([int(n), int(gap)])
            else:
                out["full"].append({"n": int(n), "gap": int(gap), "reason": reason})
        return out

    def with_params(self, **changes: Any) -> ImplementedCells:
        """The same builder with some DNA parameters changed (``leak=...``, ``fuel=...``)."""
        return dataclasses.replace(self, params=dataclasses.replace(self.params, **changes))


def formal_horizon(formal: Network) -> float:
    """The stochastic runs' default horizon of the formal network, in its time unit.

    Used as the default horizon on the implementation too, so both runs cover
    the same stretch of time (the implementation's own default would follow
    its fast fuel reactions).
    """
    from crn.solvers.simulate import default_horizon

    return float(default_horizon(formal))


def formal_ode_horizon(formal: Network) -> float:
    """The mean field's default horizon of the formal network, in its time unit."""
    from crn.solvers.ode import default_horizon

    return float(default_horizon(formal))


def fuel_left_ode(impl: Implementation, result: MeanFieldResult) -> dict[str, float]:
    """Fraction of each fuel species left at the end of a mean-field solve of ``impl.network``.

    Parameters
    ----------
    impl : crn.dna.Implementation
    result : crn.solvers.ode.MeanFieldResult
        A solve of ``impl.network`` (values in concentrations, molecules per
        unit = the volume).

    Returns
    -------
    dict of str to float
        Fuel species -> remaining fraction (initial fuel 1).
    """
    values = np.asarray(result.values, dtype=np.float64)
    last = values[-1] if values.shape[0] else np.asarray(impl.network.initial, dtype=np.float64)
    return impl.fuel_remaining(last * float(result.molecules_per_unit)
                               if values.shape[0] else last)


def fuel_left_at_decision(impl: Implementation, window: MeanFieldWindow) -> dict[str, float]:
    """Fraction of each fuel species left where the mean field of ``impl.network`` first decides.

    The same figure as :func:`fuel_left_ode` of a solve stopping at the first
    consensus (at the horizon when there is none), read from the one solve
    behind a comparison window instead of a second solve.

    Parameters
    ----------
    impl : crn.dna.Implementation
    window : crn.analyses.compare.MeanFieldWindow
        The window of ``impl.network`` (:func:`crn.analyses.compare.mean_field_windows`).

    Returns
    -------
    dict of str to float
        Fuel species -> remaining fraction (initial fuel 1).
    """
    return impl.fuel_remaining(window.counts_at_stop)


def fuel_left_runs(impl: Implementation, ensemble: Ensemble) -> dict[str, float]:
    """Mean over the runs of the fraction of each fuel species left at the last sample time.

    Parameters
    ----------
    impl : crn.dna.Implementation
    ensemble : crn.solvers.simulate.Ensemble
        Runs of ``impl.network`` sampled up to their horizon.

    Returns
    -------
    dict of str to float
        Fuel species -> mean remaining fraction (empty when no run finished).
    """
    if ensemble.runs == 0 or ensemble.counts.shape[1] == 0:
        return {}
    last = ensemble.counts[:, -1, :].astype(np.float64).mean(axis=0)
    return impl.fuel_remaining(last)


def fuel_left_at_horizon(impl: Implementation, ensemble: Ensemble,
                         course: TimeCourse | None = None) -> dict[str, float]:
    """Fraction of each fuel species left at the runs' horizon, from the runs or their time course.

    From the runs' own last samples when the ensemble has any
    (:func:`fuel_left_runs`); else from the mean counts of the runs' time course
    at its last sample time. Either way the mean over the runs of count /
    initial count.

    Parameters
    ----------
    impl : crn.dna.Implementation
    ensemble : crn.solvers.simulate.Ensemble
        Runs of ``impl.network``.
    course : crn.solvers.time_course.TimeCourse, optional
        The runs' time course in counts, used when the ensemble has no sample.

    Returns
    -------
    dict of str to float
        Fuel species -> mean remaining fraction; empty when neither source has a sample.
    """
    left = fuel_left_runs(impl, ensemble)
    if not left and course is not None and len(course.times):
        left = impl.fuel_remaining(np.asarray(course.mean[-1], dtype=np.float64))
    return left


@dataclass(frozen=True)
class Diagnosis:
    """Why an implementation does (not) decide like its formal network, from the mean field.

    Attributes
    ----------
    reason : str
        ``decides`` (the implementation's mean field reaches the correct
        consensus by the deadline), ``fuel runs out`` (some fuel species falls
        below :data:`FUEL_OUT` before a decision, and the leak is not to
        blame), ``leak dominates`` (without the leak it would decide; with it
        minority signal is made faster than it is removed, and the leak burns
        fuel as it goes), ``too slow`` (no decision by the deadline with fuel
        left and no leak to blame) or ``formal fails`` (the formal network
        itself does not decide correctly by the deadline) or ``too few runs``
        (the mean field decides, but ``runs_max`` runs without a single wrong
        one still leave the 95% upper bound of P(wrong) above the risk).
    formal_time, time : float or None
        Mean-field consensus time of the formal network and of the
        implementation (formal time units).
    label : str or None
        The implementation's mean-field consensus label.
    correct : str or None
    fuel_left : dict of str to float
        At the end of the implementation's solve.
    time_without_leak : float or None
        Consensus time of the implementation with the leak set to 0 (only
        computed when the leak is positive and the implementation fails).
    runs_max : int or None
        ``too few runs``: the runs allowed per population.
    risk_floor : float or None
        ``too few runs``: the smallest 95% upper bound of P(wrong) that
        ``runs_max`` runs can give (all of them correct).
    runs_needed : int or None
        ``too few runs``: the fewest runs whose floor lies below the risk.
    """

    reason: str
    formal_time: float | None
    time: float | None
    label: str | None
    correct: str | None
    fuel_left: dict
    time_without_leak: float | None = None
    runs_max: int | None = None
    risk_floor: float | None = None
    runs_needed: int | None = None

    def text(self) -> str:
        """One sentence for the designer."""
        if self.reason == "too few runs":
            return (f"too few runs: its mean field decides {self.label} at {self.time:.4g}, "
                    f"but {self.runs_max:,} runs without a wrong one bound P(wrong) only "
                    f"below {self.risk_floor:.3g} (95%, simultaneous over the looks), not "
                    f"below the risk: raise --runs-max to at least {self.runs_needed:,}")
        if self.reason == "decides":
            return (f"its mean field decides {self.label} at {self.time:.4g}, so the risk stays "
                    "above the target through stochastic error alone up to the largest n "
                    "searched: raise --n-max or relax the risk")
        low = min(self.fuel_left.values()) if self.fuel_left else None
        if self.reason == "fuel runs out":
            return (f"fuel runs out (least fuel left {low:.1%}) before the signals decide: "
                    f"raise --fuel")
        if self.reason == "leak dominates":
            return ("leak dominates: the leak makes minority signal faster than the circuit "
                    "removes it"
                    + ("" if self.time_without_leak is None
                       else f" (without leak it decides at {self.time_without_leak:.4g})")
                    + ": lower --leak or the fuel concentration")
        if self.reason == "formal fails":
            return "the formal network itself does not decide correctly by the deadline"
        return "too slow: no decision by the deadline although fuel is left"


def _decides(net: Network, until: float):
    from crn.solvers.ode import solve_mean_field

    result = solve_mean_field(net, until=float(until), stop_at_consensus=True)
    return result


def diagnose(formal: Network, scheme: str, params: DnaParameters, until: float) -> Diagnosis:
    """Compare the implementation's mean-field decision with the formal one, and say why it fails.

    Parameters
    ----------
    formal : Network
    scheme : str
    params : crn.dna.DnaParameters
    until : float
        The deadline (formal time units).

    Returns
    -------
    Diagnosis
    """
    from crn.core.outcome import correct_label

    truth = correct_label(formal)
    formal_result = _decides(formal, until)
    formal_time = formal_result.consensus.time
    formal_ok = formal_result.consensus.label is not None and (
        truth is None or formal_result.consensus.label == truth)
    impl = implementation_of(formal, scheme, params)
    result = _decides(impl.network, until)
    left = fuel_left_ode(impl, result)
    label, time = result.consensus.label, result.consensus.time
    common = dict(formal_time=formal_time, time=time, label=label, correct=truth, fuel_left=left)
    if label is not None and (truth is None or label == truth):
        return Diagnosis("decides", **common)
    if not formal_ok:
        return Diagnosis("formal fails", **common)
    if float(params.leak) > 0:
        clean = implementation_of(formal, scheme, dataclasses.replace(params, leak=0.0))
        without = _decides(clean.network, until).consensus
        if without.label is not None and (truth is None or without.label == truth):
            return Diagnosis("leak dominates", time_without_leak=without.time, **common)
    if left and min(left.values()) < FUEL_OUT:
        return Diagnosis("fuel runs out", **common)
    return Diagnosis("too slow", **common)


def finite(value) -> float | None:
    """``value`` as a float, None when it is None or not finite."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None
