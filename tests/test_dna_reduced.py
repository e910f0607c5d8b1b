"""The reduced model of a DNA implementation (binding at steady state) against the full one."""

import json

import numpy as np
import pytest
from scipy.stats import fisher_exact, ks_2samp
from seeds import seed
from ssa_reference import net_changes, run_by_hand

from crn.analyses.implemented import ImplementedCells, implementation_of
from crn.analyses.probes import InitialSplit
from crn.cli import main
from crn.core.network import Network, Reaction
from crn.dna import DnaParameters
from crn.dna.implementation import Builder
from crn.dna.reduced import MIN_FUEL_EXCESS, ReducedNetwork, reduced_network, reduction_of
from crn.engines.reduced import reduced_propensities, run_reduced
from crn.io.models import load_model
from crn.solvers.simulate import simulate

AM = "models/approximate_majority.toml"
C = 1e-8  # 10 nM of signal
RATE = 1e5  # /M/s per unit of formal rate
Q_MAX = 6e6  # /M/s, the default fastest displacement (7-nt toehold)

#: Checks of the reduced model against the full network below: 4 cells x (P(wrong), times).
CHECKS = 8
#: Per-check level: the eight checks together raise a false alarm with probability below
#: 1% when the two models agree (Bonferroni).
ALPHA = 0.01 / CHECKS


def _params(excess, **changes):
    return DnaParameters(rate=RATE, concentration=C, fuel=excess * C, **changes)


def _am(n, gap):
    return load_model(AM, {"n": n, "gap": gap}).network


def _join(a=30, b=20, volume=50):
    return Network.from_reactions("join", ["A", "B", "C"],
                                  [Reaction({"A": 1, "B": 1}, {"C": 1}, 1.0)],
                                  volume=volume, initial={"A": a, "B": b})


def test_output_rate_of_one_reaction_is_the_hand_derived_quasi_steady_state_rate():
    """derived: ssw implementation of A + B -> C (rate 1) in counts and formal units (rates
    over RATE, so q = Q_MAX / RATE), volume v, every fuel species at F molecules: A + L <->
    H + BB at c_f = 1 / v, c_r = q / v; B + H -> O at c_s = q / v; B has no first step, so
    its buffering module B + LS <-> HS + BS binds at 1 / v (the largest load minus B's, 0)
    and unbinds at q / v. At quasi-steady state a molecule of B sits in HS with odds
    rho_B = E[LS] / (q E[BS]) to being free, E[LS] = F - E[HS], E[BS] = F + E[HS]; a
    molecule of A sits in H with odds rho = E[L] / (q E[BB] + q E[B_free]) (it leaves H by
    unbinding or by meeting a free B), E[H] = A rho / (1 + rho), E[L] = F - E[H], E[BB] =
    F + E[H]; the output is made at c_s E[B_free] E[H]. Solved here by plain iteration to
    machine precision; the engine's three sweeps agree within 1e-9 (relative)."""
    formal = _join()
    impl = implementation_of(formal, "ssw", _params(100))
    net = reduced_network(impl)
    assert isinstance(net, ReducedNetwork)
    v = formal.volume
    q = Q_MAX / RATE
    fuel = 100 * v  # molecules of each fuel species: F v / C
    a, b = 30.0, 20.0
    h = hs = 0.0
    for _ in range(50):
        rho_b = (fuel - hs) / (q * (fuel + hs))
        hs = b * rho_b / (1 + rho_b)
        rho = (fuel - h) / (q * (fuel + h) + q * (b - hs))
        h = a * rho / (1 + rho)
    expected = q / v * (b - hs) * h
    props = reduced_propensities(net, impl.network.initial)
    output = next(i for i, r in enumerate(net.reduction.slow)
                  if set(impl.network.reactions()[r].reactants) == {"B", "H_r1"})
    assert props[output] == pytest.approx(expected, rel=1e-9)
    # and the classic limit: with fuel >> signals the output rate is RATE A B / v (1 unit)
    assert props[output] == pytest.approx(a * b / v, rel=0.05)


def test_folding_conserves_every_strand_over_a_run():
    """The folded state (complexes counted in their signal, gate and buffer) keeps every
    domain-level strand count of the full network: H = signal + gate - buffer strand for
    strand (the invariants of tests/test_dna_schemes.py)."""
    formal = _am(40, 10)
    impl = implementation_of(formal, "ssw", _params(100, leak=1e2))
    net = reduced_network(impl)
    strands = sorted({k for v in impl.strands.values() for k in v})
    matrix = np.array([[impl.strands[s].get(k, 0) for k in strands]
                       for s in impl.network.species])
    run = run_reduced(net, until=50.0, rng=4)
    start = impl.network.initial @ matrix
    for counts in run.counts:
        assert np.array_equal(counts @ matrix, start)
    assert run.events > 0
    complexes = net.reduction.cx_species
    assert not run.counts[:, complexes].any()


@pytest.mark.parametrize("formal,changes,stop,key", [
    (lambda: _am(40, 10), {}, True, 311),
    (lambda: _am(24, 0), {"leak": 1e2}, False, 312),
    (_join, {}, False, 313),
])
def test_a_seeded_reduced_run_is_the_plain_python_direct_method_step_for_step(formal, changes,
                                                                              stop, key):
    """The reduced model's chain run by Gillespie's direct method (J. Phys. Chem. 81:2340,
    1977) in plain Python (tests/ssa_reference.py), its propensities from
    reduced_propensities (pinned to the hand derivation above) and each slow reaction's change
    folded from the full network's reaction (complex counted in its signal, gate and buffer):
    with the same seed, every sample, the event count, the end, the status and the outcome
    agree exactly with the engine."""
    impl = implementation_of(formal(), "ssw", _params(100, **changes))
    net = reduced_network(impl)
    red = net.reduction
    full = net_changes(impl.network)
    folded = [red.fold(full[i]) for i in red.slow]
    until = 60.0
    times = np.linspace(0.0, until, 7)
    run = run_reduced(net, until=until, times=times, rng=seed(key), stop_at_consensus=stop)
    counts, first, first_time, last, events, end_time, status = run_by_hand(
        lambda x: list(reduced_propensities(net, x)), folded, net.species_label,
        red.fold(net.initial), until=until, times=times, seed=seed(key), stop_at_consensus=stop)
    np.testing.assert_array_equal(run.counts, counts)
    assert (run.events, run.end_time, run.status) == (events, end_time, status)
    assert events > 10
    assert run.outcome.label == (net.labels[first] if first >= 0 else None)
    assert run.outcome.final_label == (net.labels[last] if last >= 0 else None)
    if first >= 0:
        assert run.outcome.time == first_time


def test_low_fuel_two_domain_and_forced_full_network_run_the_full_implementation():
    low = implementation_of(_am(40, 10), "ssw", _params(MIN_FUEL_EXCESS / 2))
    reason = reduction_of(low)
    assert isinstance(reason, str) and "fuel excess 5" in reason
    two = implementation_of(_am(40, 10), "two-domain", _params(100))
    assert isinstance(reduction_of(two), str)
    cells = ImplementedCells(InitialSplit(_am(40, 10)), "ssw", _params(100))
    assert cells.stochastic_model(40, 10) == ("reduced", "")
    assert isinstance(cells(40, 10), ReducedNetwork)
    forced = ImplementedCells(InitialSplit(_am(40, 10)), "ssw", _params(100), full_network=True)
    assert forced.stochastic_model(40, 10) == ("full", "asked for")
    assert type(forced(40, 10)) is Network
    lean = ImplementedCells(InitialSplit(_am(40, 10)), "ssw", _params(5))
    assert lean.stochastic_model(40, 10)[0] == "full"
    assert simulate(cells(40, 10), runs=2, until=50.0, rng=1, workers=1).engine == "reduced"
    with pytest.raises(TypeError, match="reduced model"):
        run_reduced(_am(40, 10), until=10.0, rng=1)


def _hand_built(extra):
    """An implementation of A + B -> A + A built by hand: A binds gate L (buffer BB, complex
    H), H meets B and releases A twice; ``extra(builder)`` adds what breaks the reduction."""
    formal = Network.from_reactions("pair", ["A", "B"],
                                    [Reaction({"A": 1, "B": 1}, {"A": 2}, 1.0)],
                                    volume=20, initial={"A": 10, "B": 10},
                                    output={"A": "A", "B": "B"})
    b = Builder(formal, _params(100), "hand-built")
    gate = b.add("L", "fuel", {"bottom": 1, "top": 1})
    buffer = b.add("BB", "fuel", {"top": 1})
    held = b.add("H", "intermediate", {"bottom": 1, "A_strand": 1})
    waste = b.add("W", "waste", {"bottom": 1, "A_strand": 1, "B_strand": 1})
    b.bind("A", gate, held, buffer, RATE)
    b.react({"B": 1, held: 1}, {"A": 2, waste: 1}, Q_MAX)
    extra(b)
    return b.build()


@pytest.mark.parametrize("extra,reason", [
    (lambda b: None, None),
    (lambda b: b.bind("B", "L", b.add("H2", "intermediate", {"bottom": 1, "B_strand": 1}),
                      b.add("BB2", "fuel", {"top2": 1}), RATE),
     "L, BB2 or H2 takes part in two bindings"),
    (lambda b: b.bind("B", b.add("L2", "fuel", {"bottom2": 1, "top2": 1}),
                      b.add("H2", "intermediate", {"bottom2": 1, "A_strand": 1}),
                      b.add("BB2", "fuel", {"top2": 1}), RATE),
     "complex H2 does not report the label of its signal B"),
    (lambda b: b.react({"B": 1, "W": 1}, {"H": 1}, RATE), "a slow reaction makes a complex"),
    (lambda b: b.react({"L": 2}, {"W": 1}, RATE),
     "a slow reaction takes two gates or buffers at once"),
    (lambda b: b.react({"H": 2}, {"W": 1}, RATE), "a slow reaction takes two of complex H"),
])
def test_each_reason_a_reduction_is_refused(extra, reason):
    """A hand-built implementation reduces; each addition that breaks one of the reduced
    model's assumptions (module notes of crn.dna.reduced) is refused with its own reason."""
    found = reduction_of(_hand_built(extra))
    if reason is None:
        assert not isinstance(found, str)
        assert found.n_complexes == 1 and found.slow.tolist() == [2]
    else:
        assert isinstance(found, str) and found.startswith(reason)


@pytest.mark.parametrize("n,gap", [(12, 2), (24, 4)])
@pytest.mark.parametrize("excess", [10, 100])
def test_reduced_model_decides_like_the_full_network(n, gap, excess):
    """Rao & Arkin, J. Chem. Phys. 118:4999, 2003 (stochastic QSSA): where the fast binding
    relaxes much faster than the slow reactions, the reduced model has the full network's
    law. Checked on approximate majority at two small populations and at fuel excess 10
    (the least at which the reduced model is used) and 100 (the default), 400 runs each:
    P(wrong) by Fisher's exact test and the consensus-time distribution by the two-sample
    Kolmogorov-Smirnov test (which bounds the gap between the two empirical CDFs, so every
    consensus-time quantile of one lies within that gap of the other's), each at level
    0.01 / 8: all eight checks together raise a false alarm with probability below 1%
    when the models agree. The same KS test tells the formal network's times from the full
    implementation's (it has the power to fail)."""
    formal = _am(n, gap)
    impl = implementation_of(formal, "ssw", _params(excess))
    runs = 400

    def decided(net, engine):
        ens = simulate(net, runs=runs, until=300.0, rng=2026, workers=1, engine=engine,
                       stop_at_consensus=True)
        assert np.isfinite(ens.consensus_times).all()
        return sum(label != "X" for label in ens.labels), ens.consensus_times

    wrong_full, t_full = decided(impl.network, "direct")
    wrong_red, t_red = decided(reduced_network(impl), "auto")
    p_wrong = fisher_exact([[wrong_full, runs - wrong_full], [wrong_red, runs - wrong_red]])[1]
    assert p_wrong > ALPHA, (wrong_full, wrong_red)
    assert ks_2samp(t_full, t_red).pvalue > ALPHA, (np.median(t_full), np.median(t_red))
    if excess == 10:
        _, t_formal = decided(formal, "direct")
        assert ks_2samp(t_full, t_formal).pvalue < ALPHA


def test_regimes_json_says_which_model_ran_and_full_network_forces_the_full_one(capsys):
    args = ["regimes", AM, "--n", "12", "--gaps", "2", "--implement", "ssw", "--fuel", "100nM",
            "--runs-max", "50", "--seed", "3", "--method", "stochastic", "--json"]
    reduced = json.loads(_out(capsys, args))
    assert reduced["implementation"]["stochastic_model"] == {"reduced": [[12, 2]], "full": []}
    full = json.loads(_out(capsys, [*args, "--full-network"]))
    assert full["implementation"]["stochastic_model"] == {
        "reduced": [], "full": [{"n": 12, "gap": 2, "reason": "asked for"}]}
    lean = json.loads(_out(capsys, [*args[:9], "30nM", *args[10:]]))
    assert "fuel excess 3" in lean["implementation"]["stochastic_model"]["full"][0]["reason"]


def test_full_network_without_implement_is_an_error(capsys):
    assert main(["regimes", AM, "--n", "12", "--gaps", "2", "--full-network"]) == 2
    assert "--full-network needs --implement" in capsys.readouterr().err
    assert main(["copies", AM, "--gap-fraction", "0.1", "--full-network"]) == 2
    assert "--full-network needs --implement" in capsys.readouterr().err


def _out(capsys, args):
    assert main(args) == 0
    return capsys.readouterr().out


@pytest.mark.parametrize("weights,total", [([1, 2, 1, 3], 40), ([2, 2, 1], 301), ([1] * 6, 25),
                                          ([1, 2] * 20, 3000)])
def test_configuration_bound_of_a_conservation_law_covers_the_exact_count(weights, total):
    """derived: the exact number of solutions of weights @ x = total (dynamic programming in
    integers) lies within one part in a million below the bound the regime map reads
    (computed in floating point, so an implementation's fuel totals take seconds at most)."""
    from crn.solvers.configurations import _knapsack_bound

    ways = [1] + [0] * total
    for w in weights:
        for c in range(w, total + 1):
            ways[c] += ways[c - w]
    bound = _knapsack_bound(np.array(weights), total)
    assert ways[total] <= bound <= ways[total] * (1 + 2e-6) + 1


@pytest.mark.parametrize("excess", [pytest.param(10, marks=pytest.mark.slow), 100])
def test_segmented_runs_decide_like_the_reduced_models_direct_runs(excess):
    """The segmented runs (rate constants frozen per segment at their extrapolated midpoint,
    signals exact on the batched engine, fuel from the firings) against the reduced model's
    exact direct runs, approximate majority n = 200, 300 runs each: P(wrong) by Fisher's
    exact test and consensus times by the two-sample KS test, each at level 0.01 / 4 (the
    four checks of both fuel levels together raise a false alarm with probability below
    1% when the two agree). Fuel excess 10 drifts the rate constants fastest (the most
    segments: 40 s, so it runs with the slow tests; excess 100 covers the same code)."""
    from crn.engines.segmented import run_segmented

    impl = implementation_of(_am(200, 10), "ssw", _params(excess))
    net = reduced_network(impl)
    assert net.reduction.protocol is not None
    seeds = np.random.SeedSequence(77).spawn(300)

    def decided(run):
        out = [run(net, until=300.0, rng=np.random.default_rng(s), stop_at_consensus=True)
               for s in seeds]
        assert all(r.outcome.time is not None for r in out)
        return (sum(r.outcome.label != "X" for r in out),
                np.array([r.outcome.time for r in out]))

    wrong_seg, t_seg = decided(run_segmented)
    wrong_dir, t_dir = decided(run_reduced)
    assert fisher_exact([[wrong_seg, 300 - wrong_seg], [wrong_dir, 300 - wrong_dir]])[1] > 0.0025
    assert ks_2samp(t_seg, t_dir).pvalue > 0.0025, (np.median(t_seg), np.median(t_dir))


def test_large_populations_run_in_segments_and_leak_keeps_the_direct_runs(monkeypatch):
    import crn.engines.segmented as segmented

    impl = implementation_of(_am(200, 10), "ssw", _params(100))
    net = reduced_network(impl)
    monkeypatch.setattr(segmented, "SEGMENTED_FROM", 100)
    run = run_reduced(net, until=100.0, rng=1, stop_at_consensus=True)
    # formal firings, not the reduced model's slow events (two per firing)
    direct = segmented.run_segmented(net, until=100.0, rng=1, stop_at_consensus=True)
    assert (run.events, run.outcome) == (direct.events, direct.outcome)
    leaky = reduced_network(implementation_of(_am(200, 10), "ssw", _params(100, leak=10.0)))
    assert leaky.reduction.protocol is None
    assert run_reduced(leaky, until=5.0, rng=1).status == "horizon"
    fuel = {s: leaky.index[s] for s in impl.fuel}
    used = run_reduced(leaky, until=5.0, rng=1).counts[-1]
    assert any(used[i] < leaky.initial[i] for i in fuel.values())


def test_engine_reduced_on_a_network_without_a_reduced_model_is_an_error(capsys):
    assert main(["ssa", AM, "--set", "n=20", "--engine", "reduced", "--runs", "2"]) == 2
    assert "engine reduced runs the reduced model" in capsys.readouterr().err
