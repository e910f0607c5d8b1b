"""Running the analyses on a DNA implementation instead of the formal network.

Every analysis (mean field, stochastic runs, exact chains, regime maps, copy
numbers) takes a network, or a builder ``(n, gap) -> Network`` for the cells of
a sweep. :class:`ImplementedCells` wraps a formal builder so that each cell's
formal network is implemented in DNA (:func:`crn.dna.implement`) and the
analysis runs on the implementation network: same volume convention and same
time unit as the formal run (parallel time for a protocol), decisions read from
the signal species only (fuel, intermediates and waste are ignored by the
consensus rule, :data:`crn.core.network.IGNORED`).

The helpers here also say how much fuel is left at the end of a run and why an
implementation fails to decide where its formal network decides (fuel runs
out, leak dominates).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from crn.core.network import Network
from crn.core.units import AVOGADRO

__all__ = ["ImplementedCells", "implementation_of", "decision_network", "held_labels",
           "held_matrix",
           "fuel_left_ode", "fuel_left_runs",
           "formal_horizon", "Diagnosis", "diagnose", "FUEL_OUT"]

#: A fuel species with less than this fraction left counts as run out.
FUEL_OUT = 0.05


def held_labels(impl) -> dict[str, int]:
    """Label index each intermediate species reports: what it holds, in formal terms.

    The rule (the same formal state the intermediate stands for): an
    intermediate that carries strands of signal species (a signal bound
    reversibly to a gate, or sequestered by a buffering module) reports their
    common label; one that carries none but releases signals when it meets a
    fuel species (a committed output waiting for its translator or fork)
    reports the common label of its formal reaction's products; any other
    (a released by-product strand) stays ignored.
    Mixed labels, or a species that reports nothing, give -1 (blocks consensus,
    as the formal species would); a reaction without products keeps the
    intermediate ignored. So a configuration of the implementation is in
    consensus exactly when the formal configuration it stands for is, and the
    last minority molecule held in a gate still counts.

    Parameters
    ----------
    impl : crn.dna.Implementation

    Returns
    -------
    dict of str to int
        Intermediate species -> label index (into ``impl.network.labels``), -1
        for none, :data:`crn.core.network.IGNORED` to keep it ignored.
    """
    from crn.core.network import IGNORED

    formal = impl.formal
    net = impl.network
    strand_of = {f"{s}_strand": s for s in formal.species}
    module_of = {}
    for module in impl.modules:
        for s in module.species:
            module_of[s] = module

    def common(species) -> int:
        labels = {int(net.species_label[net.index[s]]) for s in species}
        return labels.pop() if len(labels) == 1 else -1

    releases = set()  # intermediates that meet a fuel species and release signals: outputs
    for r in net.reactions():
        if any(impl.roles[x] == "fuel" for x in r.reactants) and \
                any(impl.roles[x] == "signal" for x in r.products):
            releases.update(x for x in r.reactants if impl.roles[x] == "intermediate")
    out = {}
    for s, role in impl.roles.items():
        if role != "intermediate":
            continue
        held = [strand_of[k] for k in impl.strands.get(s, {}) if k in strand_of]
        if held:
            out[s] = common(held)
            continue
        module = module_of.get(s)
        if s not in releases or module is None or module.formal is None:
            continue
        products = formal.reaction(module.formal).products
        out[s] = common(products) if products else IGNORED
    return out


def held_matrix(impl) -> np.ndarray:
    """Signal strands each implementation species carries while not consumed.

    Returns
    -------
    ndarray of float64, shape (n_species, n_formal_species)
        Row of a signal species: 1 at itself; row of an intermediate: the
        number of each signal's strands it carries; fuel and waste rows are 0.
        ``counts @ held_matrix(impl)`` gives each formal species free plus held
        in gates.
    """
    net, formal = impl.network, impl.formal
    out = np.zeros((net.n_species, formal.n_species))
    strand_of = {f"{s}_strand": formal.index[s] for s in formal.species}
    for s, role in impl.roles.items():
        i = net.index[s]
        if role == "signal":
            out[i, formal.index[s]] = 1.0
        elif role == "intermediate":
            for k, m in impl.strands.get(s, {}).items():
                if k in strand_of:
                    out[i, strand_of[k]] += m
    return out


def decision_network(impl) -> Network:
    """``impl.network`` with its intermediates labelled by :func:`held_labels`.

    The network every analysis runs on: decisions are read from the signal
    species and from the signals the gates hold, so a minority molecule
    momentarily inside a gate does not let a run reach a false consensus.
    """
    import dataclasses as _dc

    net = impl.network
    labels = np.array(net.species_label, dtype=np.int64)
    for s, k in held_labels(impl).items():
        labels[net.index[s]] = k
    labels.flags.writeable = False
    return _dc.replace(net, species_label=labels)


def implementation_of(formal: Network, scheme: str, params):
    """Implement one formal network in DNA (:func:`crn.dna.implement`), for analysis.

    The returned implementation's ``network`` is :func:`decision_network`'s:
    intermediates report what they hold.

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

    impl = implement(formal, scheme, params)
    return dataclasses.replace(impl, network=decision_network(impl))


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
    """

    formal: Callable[[int, int], Network]
    scheme: str
    params: object
    volume_liters: float | None = None

    def params_for(self, n: int):
        """The DNA parameters of the cell with n agents."""
        if self.volume_liters is None:
            return self.params
        return dataclasses.replace(self.params,
                                   concentration=int(n) / (self.volume_liters * AVOGADRO))

    def implementation(self, n: int, gap: int):
        """The :class:`crn.dna.Implementation` of cell (n, gap)."""
        return implementation_of(self.formal(int(n), int(gap)), self.scheme, self.params_for(n))

    def __call__(self, n: int, gap: int) -> Network:
        return self.implementation(n, gap).network

    def with_params(self, **changes) -> ImplementedCells:
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


def fuel_left_ode(impl, result) -> dict[str, float]:
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


def fuel_left_runs(impl, ensemble) -> dict[str, float]:
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
        itself does not decide correctly by the deadline).
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
    """

    reason: str
    formal_time: float | None
    time: float | None
    label: str | None
    correct: str | None
    fuel_left: dict
    time_without_leak: float | None = None

    def text(self) -> str:
        """One sentence for the designer."""
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


def diagnose(formal: Network, scheme: str, params, until: float) -> Diagnosis:
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
