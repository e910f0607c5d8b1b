"""A reduced stochastic model of a DNA implementation: fast reversible binding at steady state.

In the three-domain construction every bimolecular formal reaction starts with
a reversible binding ``X + L <-> H + B`` against a buffer strand B supplied at
the fuel concentration, and every buffering module is one such binding. With
fuel far above the signals, a signal molecule binds and unbinds many times per
formal firing (about twice the fuel excess exact events): the full network
spends nearly all its events there. The reduced model eliminates those bindings
by the stochastic quasi-steady-state approximation of Rao and Arkin (J. Chem.
Phys. 118:4999, 2003), derived from the implementation's own reactions and
rates, nothing fitted:

* the slow variables are what the bindings conserve: for each signal X its
  total ``T = X + sum_j H_j`` over the complexes it forms, for each complex j
  its gate plus the complex, ``G_j = L_j + H_j``, and its buffer minus the
  complex, ``D_j = B_j - H_j``. Every other species (translators, outputs,
  wastes, leak products) is slow as it is;
* given the slow variables, each molecule of X is free or bound in complex j
  independently, with the quasi-stationary odds of a molecule that binds at
  ``alpha_j = c_f E[L_j]`` and leaves the complex by unbinding, ``beta_j = c_r
  E[B_j]``, or by a slow reaction that consumes the complex, ``gamma_j = sum c_s
  E[partner]``: ``P(bound in j) / P(free) = alpha_j / (beta_j + gamma_j)``
  (the Michaelis-Menten form, so the output of ``X1 + L <-> H + B, X2 + H ->
  O`` is made at ``q X1 X2 L / (B + X2)`` as in the construction's own
  analysis). ``E[L_j] = G_j - E[H_j]`` and ``E[B_j] = D_j + E[H_j]`` and the
  partners' free fractions are solved by a few fixed-point sweeps;
* a slow reaction fires at its mass-action propensity averaged over that
  multinomial distribution (``T (T - 1) p_a p_b`` for two states of one
  signal, the product of means otherwise), and changes the slow variables as
  the reaction changes the full species (consuming a complex lowers T and G
  and raises D).

So fuel depletion (``G_j`` falls and ``D_j`` rises with every firing, slowing
that reaction), translator depletion, the output step and leak are all kept;
only the fast binding cycles are averaged out.

Validity. The approximation needs the binding to relax much faster than any
slow reaction changes a complex: a complex unbinds at ``q_max B`` with ``B`` at
least the fuel concentration, and is consumed at most at ``q_max`` times the
signal concentration, so the separation is at least the fuel excess
``C_max / C`` at every time of a run (the buffers only grow). The reduced
model is used when every fuel species starts at least :data:`MIN_FUEL_EXCESS`
times the signal concentration C (:func:`fuel_excess`; the lowest excess at
which it was validated against the full network, ``tests/test_dna_reduced.py``);
otherwise the full network runs and the map says so. It also needs each complex to report its
signal's label (the decision rule reads a bound signal as the signal), which
:func:`reduction_of` checks.

The reduced engine (:mod:`crn.engines.reduced`) runs on the full network's
species: bound molecules are reported inside their signal and their gates as
unbound (the complexes stay at 0).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from crn.core.network import Network

__all__ = ["Reduction", "ProtocolForm", "ReducedNetwork", "reduction_of", "reduced_network",
           "MIN_FUEL_EXCESS", "fuel_excess", "KIND_PLAIN", "KIND_SIGNAL", "KIND_COMPLEX",
           "KIND_GATE", "KIND_BUFFER"]

#: Least fuel excess (every fuel species' concentration over the signal concentration C)
#: at which the reduced model stands in for the full network; validated at 10 and 100.
MIN_FUEL_EXCESS = 10.0

KIND_PLAIN, KIND_SIGNAL, KIND_COMPLEX, KIND_GATE, KIND_BUFFER = range(5)


@dataclass(frozen=True, eq=False)
class ProtocolForm:
    """The reduced model as two-in two-out signal reactions, for large populations.

    Available when every formal reaction is ``X1 + X2 -> P1 + P2`` (a protocol's
    transitions), made of a first step (complex j meets its second reactant)
    and an output step (its output complex meets its translator), and there is
    no leak. With the output step taken as immediate (it lasts ``1 / (q_max
    C_max)``, far below the formal time scale at the validated fuel excess),
    formal reaction f fires at ``rates[f] / v * T_X1 * T_X2`` with ``rates[f] =
    v * c_s * frac(X2) * frac(H_j)`` from the quasi-steady state, and moves the
    non-signal species by ``change[f]``.

    Attributes
    ----------
    signals : ndarray of int64, shape (n_signals,)
        Species indices of the signals (the formal species).
    reactants, products : ndarray of int64, shape (n_formal, 2)
        Signal positions (into ``signals``) of each formal reaction's sides.
    complex, partner : ndarray of int64, shape (n_formal,)
        The first step's complex index and its second reactant's species.
    first_step : ndarray of float64, shape (n_formal,)
        Propensity constant c_s of the first step.
    change : ndarray of int64, shape (n_formal, n_species)
        Net change of the folded state's non-signal species per firing.
    """

    signals: np.ndarray
    reactants: np.ndarray
    products: np.ndarray
    complex: np.ndarray
    partner: np.ndarray
    first_step: np.ndarray
    change: np.ndarray


@dataclass(frozen=True, eq=False)
class Reduction:
    """The arrays of a reduced model (see the module notes), in the full network's species.

    Attributes
    ----------
    kind : ndarray of int64, shape (n_species,)
        ``KIND_PLAIN``, ``KIND_SIGNAL`` (a signal that forms complexes),
        ``KIND_COMPLEX``, ``KIND_GATE`` or ``KIND_BUFFER``.
    ref : ndarray of int64, shape (n_species,)
        Set index of a signal; complex index of a complex, gate or buffer; -1.
    cx_signal, cx_gate, cx_buffer, cx_species : ndarray of int64, shape (n_complexes,)
        Species of each complex's signal, gate, buffer and the complex itself.
    cx_set : ndarray of int64, shape (n_complexes,)
    cx_forward, cx_back : ndarray of float64, shape (n_complexes,)
        Binding and unbinding propensity constants (rate / volume).
    set_signal : ndarray of int64, shape (n_sets,)
    set_ptr, set_cx : ndarray of int64
        Complexes of each set, CSR.
    use_ptr, use_rate, use_partner : ndarray
        Slow reactions consuming each complex, CSR by complex: propensity
        constant and the other reactant's species (-1 for none).
    reactant_species, reactant_counts : ndarray of int64, shape (n_slow, width)
    constants : ndarray of float64, shape (n_slow,)
        Propensity constants ``k / v**(order - 1)`` of the slow reactions.
    change_ptr, change_species, change_delta : ndarray of int64
        Net change of each slow reaction on the folded state, CSR.
    slow : ndarray of int64, shape (n_slow,)
        Index of each slow reaction in the full network.
    """

    kind: np.ndarray
    ref: np.ndarray
    cx_signal: np.ndarray
    cx_gate: np.ndarray
    cx_buffer: np.ndarray
    cx_species: np.ndarray
    cx_set: np.ndarray
    cx_forward: np.ndarray
    cx_back: np.ndarray
    set_signal: np.ndarray
    set_ptr: np.ndarray
    set_cx: np.ndarray
    use_ptr: np.ndarray
    use_rate: np.ndarray
    use_partner: np.ndarray
    reactant_species: np.ndarray
    reactant_counts: np.ndarray
    constants: np.ndarray
    change_ptr: np.ndarray
    change_species: np.ndarray
    change_delta: np.ndarray
    slow: np.ndarray
    protocol: ProtocolForm | None = None

    @property
    def n_complexes(self) -> int:
        """Number of complexes of the reduced model."""
        return int(self.cx_species.shape[0])

    @cached_property
    def group(self) -> np.ndarray:
        """Set index of each signal and complex species, -1 for every other species."""
        out = np.where((self.kind == KIND_SIGNAL), self.ref, -1)
        complexes = self.kind == KIND_COMPLEX
        out[complexes] = self.cx_set[self.ref[complexes]]
        return np.ascontiguousarray(out, dtype=np.int64)

    @cached_property
    def used(self) -> np.ndarray:
        """Species that some slow reaction takes as a reactant, or that a complex's leaving
        rate reads.
        """
        species = set(int(s) for s in self.reactant_species.ravel() if s >= 0)
        species.update(int(p) for p in self.use_partner if p >= 0)
        return np.array(sorted(species), dtype=np.int64)

    def fold(self, counts) -> np.ndarray:
        """Full-network counts with every complex folded into its signal, gate and buffer."""
        x = np.array(counts, dtype=np.int64)
        for j in range(self.n_complexes):
            h = x[self.cx_species[j]]
            x[self.cx_signal[j]] += h
            x[self.cx_gate[j]] += h
            x[self.cx_buffer[j]] -= h
            x[self.cx_species[j]] = 0
        return x


@dataclass(frozen=True, eq=False)
class ReducedNetwork(Network):
    """A full implementation network that carries its reduced model.

    Every analysis that reads the network (mean field, exact chains, the
    ``direct`` engine) sees the full implementation; stochastic runs with
    ``engine="auto"`` use the reduced model (:mod:`crn.engines.reduced`).
    """

    reduction: Reduction | None = field(default=None, repr=False)


def _binding_pairs(impl):
    """(forward, back) reaction index pairs ``X + L <-> H + B`` of the implementation."""
    net = impl.network
    roles = impl.roles
    reactions = list(net.reactions())
    key = {}
    for i, r in enumerate(reactions):
        key.setdefault((tuple(sorted(r.reactants.items())), tuple(sorted(r.products.items()))),
                       []).append(i)
    pairs = []
    for i, r in enumerate(reactions):
        if r.order != 2 or len(r.reactants) != 2 or len(r.products) != 2:
            continue
        if sorted(roles[s] for s in r.reactants) != ["fuel", "signal"]:
            continue
        if sorted(roles[s] for s in r.products) != ["fuel", "intermediate"]:
            continue
        back = key.get((tuple(sorted(r.products.items())), tuple(sorted(r.reactants.items()))))
        if not back:
            continue
        pairs.append((i, back[0]))
    return pairs


def fuel_excess(impl) -> float:
    """Least fuel concentration over the signal concentration C (``C_max / C`` for ssw)."""
    least = min(impl.fuel.values(), default=0.0)
    return float(least) / float(impl.params.concentration)


def reduction_of(impl) -> Reduction | str:
    """The reduced model of an implementation, or why it has none.

    Parameters
    ----------
    impl : crn.dna.Implementation
        Its ``network`` is the one the analyses run (with the decision labels).

    Returns
    -------
    Reduction or str
        The reduced model, or a one-line reason the full network must run
        (no fast binding to eliminate, too little fuel, a complex that a slow
        reaction makes or that reports another label than its signal).
    """
    pairs = _binding_pairs(impl)
    if not pairs:
        return "the implementation has no reversible binding to eliminate"
    excess = fuel_excess(impl)
    if excess < MIN_FUEL_EXCESS * (1 - 1e-9):
        return (f"fuel excess {excess:.3g} is below {MIN_FUEL_EXCESS:g}, the least at which "
                f"the reduced model is validated")
    net = impl.network
    reactions = list(net.reactions())
    bindings = _read_bindings(impl, reactions, pairs)
    if isinstance(bindings, str):
        return bindings
    fast = {i for pair in pairs for i in pair}
    slow = [i for i in range(len(reactions)) if i not in fast]
    reason = _slow_reason(net, reactions, slow, bindings.kind)
    if reason is not None:
        return reason
    tables = _slow_tables(net, reactions, slow, bindings)
    if isinstance(tables, str):
        return tables
    protocol = _protocol_form(impl, slow, bindings.kind, bindings.ref, bindings.signal,
                              tables.change_ptr, tables.change_species, tables.change_delta,
                              tables.constants)
    return _assemble(net, bindings, tables, slow, protocol)


@dataclass
class _Bindings:
    """What the fast bindings make of the species: kinds, references, complexes (lists)."""

    kind: np.ndarray
    ref: np.ndarray
    signal: list[int] = field(default_factory=list)
    gate: list[int] = field(default_factory=list)
    buffer: list[int] = field(default_factory=list)
    species: list[int] = field(default_factory=list)
    set: list[int] = field(default_factory=list)
    forward: list[float] = field(default_factory=list)
    back: list[float] = field(default_factory=list)
    sets: list[int] = field(default_factory=list)  # the signal species of each set


@dataclass
class _SlowTables:
    """The slow reactions' constants, the complexes they consume, their folded changes."""

    constants: list[float]
    uses: list[list[tuple[float, int]]]  # per complex: (constant, other reactant or -1)
    change_ptr: list[int]
    change_species: list[int]
    change_delta: list[int]


def _read_bindings(impl, reactions, pairs) -> _Bindings | str:
    """Kinds of species and the complexes of the binding pairs, or why they do not reduce."""
    net = impl.network
    roles = impl.roles
    volume = float(net.volume)
    b = _Bindings(kind=np.full(net.n_species, KIND_PLAIN, dtype=np.int64),
                  ref=np.full(net.n_species, -1, dtype=np.int64))
    kind, ref = b.kind, b.ref
    for fwd, back in pairs:
        r = reactions[fwd]
        x = next(s for s in r.reactants if roles[s] == "signal")
        gate = next(s for s in r.reactants if roles[s] == "fuel")
        h = next(s for s in r.products if roles[s] == "intermediate")
        buffer = next(s for s in r.products if roles[s] == "fuel")
        xi, gi, hi, bi = (net.index[s] for s in (x, gate, h, buffer))
        if kind[gi] != KIND_PLAIN or kind[bi] != KIND_PLAIN or kind[hi] != KIND_PLAIN:
            return f"{gate}, {buffer} or {h} takes part in two bindings"
        if net.species_label[hi] != net.species_label[xi]:
            return f"complex {h} does not report the label of its signal {x}"
        if kind[xi] == KIND_PLAIN:
            kind[xi] = KIND_SIGNAL
            ref[xi] = len(b.sets)
            b.sets.append(xi)
        j = len(b.species)
        kind[gi], kind[bi], kind[hi] = KIND_GATE, KIND_BUFFER, KIND_COMPLEX
        ref[gi] = ref[bi] = ref[hi] = j
        b.signal.append(xi)
        b.gate.append(gi)
        b.buffer.append(bi)
        b.species.append(hi)
        b.set.append(int(ref[xi]))
        b.forward.append(r.rate / volume)
        b.back.append(reactions[back].rate / volume)
    return b


def _slow_reason(net, reactions, slow, kind) -> str | None:
    """Why the slow reactions do not fit the reduced model (one makes a complex or takes two
    gates or buffers at once), or None.
    """
    for i in slow:
        if any(kind[net.index[s]] == KIND_COMPLEX for s in reactions[i].products):
            return f"a slow reaction makes a complex ({reactions[i]})"
        if any(kind[net.index[s]] in (KIND_GATE, KIND_BUFFER) and m > 1
               for s, m in reactions[i].reactants.items()):
            return f"a slow reaction takes two gates or buffers at once ({reactions[i]})"
    return None


def _slow_tables(net, reactions, slow, b: _Bindings) -> _SlowTables | str:
    """Propensity constants, complex uses and folded changes of the slow reactions."""
    volume = float(net.volume)
    tables = _SlowTables(constants=[], uses=[[] for _ in b.species], change_ptr=[0],
                         change_species=[], change_delta=[])
    for i in slow:
        r = reactions[i]
        c = r.rate / volume ** (r.order - 1)
        tables.constants.append(c)
        for s, m in r.reactants.items():
            si = net.index[s]
            if b.kind[si] == KIND_COMPLEX:
                if m > 1:
                    return f"a slow reaction takes two of complex {s} ({r})"
                others = [net.index[o] for o in r.reactants if o != s]
                tables.uses[int(b.ref[si])].append((c, others[0] if others else -1))
        folded = _folded_change(net, r, b)
        for s in sorted(folded):
            if folded[s]:
                tables.change_species.append(s)
                tables.change_delta.append(folded[s])
        tables.change_ptr.append(len(tables.change_species))
    return tables


def _folded_change(net, r, b: _Bindings) -> dict[int, int]:
    """Net change of reaction r with each complex counted in its signal, gate and buffer."""
    delta: dict[int, int] = {}
    for s, m in r.reactants.items():
        delta[net.index[s]] = delta.get(net.index[s], 0) - m
    for s, m in r.products.items():
        delta[net.index[s]] = delta.get(net.index[s], 0) + m
    folded: dict[int, int] = {}
    for s, d in delta.items():
        if b.kind[s] == KIND_COMPLEX:
            j = int(b.ref[s])
            for target, sign in ((b.signal[j], 1), (b.gate[j], 1), (b.buffer[j], -1)):
                folded[target] = folded.get(target, 0) + sign * d
        else:
            folded[s] = folded.get(s, 0) + d
    return folded


def _ints(values) -> np.ndarray:
    return np.ascontiguousarray(values, dtype=np.int64)


def _floats(values) -> np.ndarray:
    return np.ascontiguousarray(values, dtype=np.float64)


def _assemble(net, b: _Bindings, tables: _SlowTables, slow: list[int],
              protocol: ProtocolForm | None) -> Reduction:
    """The :class:`Reduction` arrays, with the sets' complexes and the complexes' uses as CSR."""
    n_cx = len(b.species)
    set_ptr: list[int] = [0]
    set_cx: list[int] = []
    for g in range(len(b.sets)):
        set_cx.extend(j for j in range(n_cx) if b.set[j] == g)
        set_ptr.append(len(set_cx))
    use_ptr, use_rate, use_partner = [0], [], []
    for j in range(n_cx):
        for c, partner in tables.uses[j]:
            use_rate.append(c)
            use_partner.append(partner)
        use_ptr.append(len(use_rate))
    slow_index = _ints(slow)
    return Reduction(
        kind=b.kind, ref=b.ref, cx_signal=_ints(b.signal), cx_gate=_ints(b.gate),
        cx_buffer=_ints(b.buffer), cx_species=_ints(b.species), cx_set=_ints(b.set),
        cx_forward=_floats(b.forward), cx_back=_floats(b.back), set_signal=_ints(b.sets),
        set_ptr=_ints(set_ptr), set_cx=_ints(set_cx), use_ptr=_ints(use_ptr),
        use_rate=_floats(use_rate), use_partner=_ints(use_partner),
        reactant_species=np.ascontiguousarray(net.reactant_species[slow_index]),
        reactant_counts=np.ascontiguousarray(net.reactant_counts[slow_index]),
        constants=_floats(tables.constants), change_ptr=_ints(tables.change_ptr),
        change_species=_ints(tables.change_species), change_delta=_ints(tables.change_delta),
        slow=slow_index, protocol=protocol)


def _protocol_form(impl, slow, kind, ref, cx_signal, change_ptr, change_species, change_delta,
                   constants) -> ProtocolForm | None:
    """The :class:`ProtocolForm` of a reduced model, or None when it has none."""
    net = impl.network
    roles = impl.roles
    if impl.leak_reactions:
        return None
    reactions = list(net.reactions())
    signals = [i for i, s in enumerate(net.species) if roles[s] == "signal"]
    position = {s: k for k, s in enumerate(signals)}
    consumer: dict[int, int] = {}  # output species -> the slow reaction (position) using it
    for k, i in enumerate(slow):
        for s in reactions[i].reactants:
            if roles[s] == "intermediate" and kind[net.index[s]] == KIND_PLAIN:
                consumer[net.index[s]] = k
    rows: dict[str, list] = {"reactants": [], "products": [], "complex": [], "partner": [],
                             "first": [], "change": []}
    used_second = set()
    for k, i in enumerate(slow):
        r = reactions[i]
        held = [net.index[s] for s in r.reactants if kind[net.index[s]] == KIND_COMPLEX]
        if not held:
            continue
        if r.order != 2:
            return None
        j = int(ref[held[0]])
        partner = next(net.index[s] for s in r.reactants if net.index[s] != held[0])
        outs = [net.index[s] for s in r.products if net.index[s] in consumer]
        if kind[partner] != KIND_SIGNAL and roles[net.species[partner]] != "signal":
            return None
        if len(outs) != 1:
            return None
        second = consumer[outs[0]]
        used_second.add(second)
        change = np.zeros(net.n_species, dtype=np.int64)
        for step in (k, second):
            for a in range(change_ptr[step], change_ptr[step + 1]):
                change[change_species[a]] += change_delta[a]
        first_signal = int(cx_signal[j])
        sides: tuple[list, list] = ([first_signal, partner], [])
        for s in signals:
            d = int(change[s])
            if s in sides[0]:
                d += sides[0].count(s)
            sides[1].extend([s] * max(d, 0))
            if d < 0:
                return None
            change[s] = 0
        if len(sides[1]) != 2:
            return None
        rows["reactants"].append([position[s] for s in sides[0]])
        rows["products"].append([position[s] for s in sides[1]])
        rows["complex"].append(j)
        rows["partner"].append(partner)
        rows["first"].append(constants[k])
        rows["change"].append(change)
    if not rows["complex"] or len(used_second) != len(consumer):
        return None
    return ProtocolForm(
        signals=np.array(signals, dtype=np.int64),
        reactants=np.array(rows["reactants"], dtype=np.int64),
        products=np.array(rows["products"], dtype=np.int64),
        complex=np.array(rows["complex"], dtype=np.int64),
        partner=np.array(rows["partner"], dtype=np.int64),
        first_step=np.array(rows["first"], dtype=np.float64),
        change=np.array(rows["change"], dtype=np.int64))


def reduced_network(impl) -> ReducedNetwork | str:
    """``impl.network`` carrying its reduced model, or why it has none (:func:`reduction_of`).

    Parameters
    ----------
    impl : crn.dna.Implementation

    Returns
    -------
    ReducedNetwork or str
    """
    reduction = reduction_of(impl)
    if isinstance(reduction, str):
        return reduction
    import dataclasses

    net = impl.network
    fields = {f.name: getattr(net, f.name) for f in dataclasses.fields(Network)}
    return ReducedNetwork(**fields, reduction=reduction)
