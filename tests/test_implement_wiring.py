"""Every analysis on a DNA implementation: `--implement` on ode, ssa, compare, exact, regimes,
copies; fuel left; the designer's questions (fuel needed, leak tolerance, copies with leak)."""

import json
import math

import numpy as np
import pytest

from crn.analyses.design_questions import fuel_for_time, implementation_copies, leak_tolerance
from crn.analyses.implemented import ImplementedCells, diagnose, fuel_left_ode
from crn.analyses.probes import InitialSplit, exact_absorption, stochastic_decisions
from crn.cli import main
from crn.dna import DnaParameters
from crn.io.models import load_model
from crn.solvers.ode import solve_mean_field

AM = "models/approximate_majority.toml"
C = 1e-8  # 10 nM of signal
RATE = 1e5  # /M/s per unit of formal rate (the DNA options' default)


def _am(n, gap):
    return load_model(AM, {"n": n, "gap": gap}).network


def _run_json(capsys, args):
    assert main(args) == 0
    return json.loads(capsys.readouterr().out)


def _fail(capsys, args) -> str:
    assert main(args) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err
    return err


# -- the commands ------------------------------------------------------------------------


def test_ode_implement_runs_in_the_formal_time_unit(capsys):
    """derived: with every species sequestered alike (the buffering modules of Soloveichik,
    Seelig & Winfree, PNAS 107:5393, 2010), a fraction lambda / q_max of each signal sits in
    first-step complexes (lambda: the largest first-step load, 2 k for approximate majority,
    where Y is first reactant of two reactions), so each bimolecular rate is scaled by
    f^2 with f = 1 / (1 + lambda / q_max): the decision time, in the formal time unit, is
    the formal one times (1 + lambda / q_max)^2 = (1 + 2e6 / 6e6)^2 = 16 / 9 at 1e6 /M/s.
    Consensus counts the signals the gates hold (crn.analyses.implemented.held_labels), so the
    threshold is the formal one. The fuel excess of 1000 makes the remaining finite-fuel
    error ~0.1%; tolerance 1%."""
    args = ["ode", AM, "--set", "n=1000", "--set", "gap=100", "--implement", "ssw",
            "--rate", "1e6/M/s", "--concentration", "10nM", "--fuel", "10uM",
            "--max-rate", "6e6/M/s", "--json"]
    obj = _run_json(capsys, args)
    formal = solve_mean_field(_am(1000, 100))
    assert obj["consensus"]["label"] == obj["formal_consensus"]["label"] == "X"
    assert obj["formal_consensus"]["time"] == pytest.approx(formal.consensus.time, rel=1e-9)
    expected = 16 / 9 * formal.consensus.time
    assert obj["consensus"]["time"] == pytest.approx(expected, rel=0.01)
    fuel = obj["fuel"]
    assert fuel and all(0 < v < 1.01 or k.startswith(("B_", "BS_")) for k, v in fuel.items())
    assert min(fuel.values()) > 0.99  # derived: ~n firings use ~1/1000 of 1000 n per gate
    assert obj["implementation"]["scheme"] == "ssw"
    assert obj["implementation"]["roles"]["signal"] == 3
    assert set(obj["signal_fractions"]) == {"X", "Y", "B"}
    assert obj["fixed_points"] is None


def test_ode_implement_text_plot_and_fuel_needed(capsys, tmp_path):
    plot = tmp_path / "o.png"
    assert main(["ode", AM, "--set", "n=200", "--set", "gap=20", "--implement", "ssw",
                 "--plot", str(plot), "--fuel-needed"]) == 0
    out = capsys.readouterr().out
    assert "ssw DNA implementation" in out and "fuel left" in out and "fuel needed" in out
    assert plot.read_bytes()[:4] == b"\x89PNG"


def test_ssa_implement_json_has_fuel_and_decides_from_signals(capsys):
    obj = _run_json(capsys, ["ssa", AM, "--set", "n=40", "--set", "gap=20", "--implement",
                             "ssw", "--fuel", "50nM", "--runs", "20", "--seed", "4",
                             "--workers", "1", "--json"])
    assert obj["runs"] == 20 and sum(obj["outcomes"].values()) == 20
    # derived: formal exact P(X) at n = 40, gap 20 exceeds 0.99; the decision is by signals
    assert obj["outcomes"]["X"] >= 18
    assert set(obj["fuel"]) == {s for s, r in _roles(40, 20, 5).items() if r == "fuel"}
    # gates are spent: the first gate of X + B -> 2 X fires about once per recruited blank
    assert obj["fuel"]["L_r3"] < 1.0
    assert obj["until"] == pytest.approx(20 * (1 + math.log(40)))  # the formal horizon


def _roles(n, gap, excess):
    cells = ImplementedCells(InitialSplit(_am(n, gap)), "ssw",
                             DnaParameters(rate=RATE, concentration=C, fuel=excess * C))
    return cells.implementation(n, gap).roles


def test_compare_implement_three_way_table_json_and_plot(capsys, tmp_path):
    plot = tmp_path / "c.png"
    args = ["compare", AM, "--set", "n=40", "--set", "gap=10", "--implement", "ssw",
            "--fuel", "50nM", "--runs", "10", "--seed", "1", "--workers", "1"]
    assert main([*args, "--plot", str(plot)]) == 0
    out = capsys.readouterr().out
    assert "formal ODE" in out and "DNA ODE" in out and "DNA runs median" in out
    assert plot.read_bytes()[:4] == b"\x89PNG"
    obj = _run_json(capsys, [*args, "--json"])
    assert {"formal_ode", "ode", "ssa", "fuel", "disagreement", "disagreement_formal",
            "implementation"} <= set(obj)
    assert obj["formal_ode"]["label"] == obj["ode"]["label"] == "X"
    assert obj["ode"]["time"] > obj["formal_ode"]["time"]  # sequestration slows it down
    assert obj["ssa"]["runs"] == 10 and "fuel" in obj["ssa"]


def test_exact_implement_fuel_runs_out(capsys, tmp_path):
    """derived: X -> Y on 4 molecules in volume 2 with gates at 1.5x the signal concentration
    gives round(1.5 * 2) = 3 gate molecules: three X convert and the fourth never can, so the
    chain is stuck without consensus with probability 1, while the formal network reaches
    consensus on y with probability 1."""
    model = tmp_path / "convert.toml"
    model.write_text('name = "convert"\n[initial]\nX = 4\n[network]\nvolume = 2\n'
                     'reactions = [{ reaction = "X -> Y", rate = 1 }]\n'
                     '[output]\nX = "x"\nY = "y"\n', encoding="utf-8")
    formal = _run_json(capsys, ["exact", str(model), "--json"])
    assert formal["probabilities"]["y"] == pytest.approx(1.0)
    obj = _run_json(capsys, ["exact", str(model), "--implement", "ssw", "--concentration",
                             "10nM", "--fuel", "15nM", "--json"])
    assert obj["implementation"]["scheme"] == "ssw"
    assert obj["probabilities"].get("y", 0.0) == pytest.approx(0.0, abs=1e-12)
    assert obj["probabilities"]["none"] == pytest.approx(1.0)
    ample = _run_json(capsys, ["exact", str(model), "--implement", "ssw", "--concentration",
                               "10nM", "--fuel", "25nM", "--json"])  # 5 gates for 4 X
    assert ample["probabilities"]["y"] == pytest.approx(1.0)


def test_regimes_implement_and_leak_tolerance(capsys):
    obj = _run_json(capsys, ["regimes", AM, "--n", "20", "--gaps", "12", "--implement", "ssw",
                             "--fuel", "50nM", "--risk", "0.2", "--runs-max", "100",
                             "--seed", "2", "--leak-tolerance", "--json"])
    assert obj["implementation"]["scheme"] == "ssw"
    (cell,) = obj["cells"]
    assert cell["ode_label"] == "X" and cell["method"] == "stochastic"
    (tol,) = obj["leak_tolerance"]
    assert tol["n"] == 20 and tol["gap"] == 12
    levels = {round(t["leak"], 12): t["ok"] for t in tol["tried"]}
    if tol["leak"] is not None:
        assert levels[round(tol["leak"], 12)]
    if tol["failing"] is not None:
        assert not levels[round(tol["failing"], 12)]


def test_copies_implement_reports_beside_the_formal_answer(capsys):
    obj = _run_json(capsys, ["copies", AM, "--gap", "6", "--risk", "0.2", "--implement",
                             "ssw", "--fuel", "50nM", "--concentration", "10nM",
                             "--runs-max", "200", "--seed", "3", "--n-max", "40", "--json"])
    assert obj["implementation"]["scheme"] == "ssw"
    assert obj["formal"]["n"]["estimate"] is not None
    assert obj["verdict"] in ("more copies", "same copies within sampling error",
                              "fewer copies", "no droplet size works")
    assert obj["concentration_molar"] == pytest.approx(1e-8)


@pytest.mark.parametrize("args, option", [
    (["ode", AM, "--fuel", "1uM"], "--fuel"),
    (["ssa", AM, "--leak", "1/M/s"], "--leak"),
    (["ode", AM, "--implement", "nope"], "--implement"),
    (["ode", AM, "--implement", "ssw", "--fuel", "-1nM"], "--fuel"),
    (["ode", AM, "--implement", "ssw", "--fuel", "1nM"], "--fuel"),
    (["ssa", AM, "--implement", "ssw", "--leak", "-2/M/s"], "--leak"),
    (["compare", AM, "--implement", "ssw", "--rate", "0/M/s"], "--rate"),
    (["exact", AM, "--implement", "ssw", "--rate", "1e9/M/s"], "--rate"),
    (["regimes", AM, "--n", "10", "--gaps", "2", "--implement", "ssw", "--concentration",
      "5 nm"], "--concentration"),
    (["copies", AM, "--gap", "2", "--implement", "ssw", "--max-rate", "10nM"], "--max-rate"),
    (["regimes", AM, "--n", "10", "--gaps", "2", "--leak-tolerance"], "--leak-tolerance"),
    (["ode", AM, "--fuel-needed"], "--fuel-needed"),
])
def test_bad_dna_input_is_one_line_naming_the_option(capsys, args, option):
    assert option in _fail(capsys, args)


# -- the library: decisions, leak, fuel ---------------------------------------------------


def test_leak_zero_large_fuel_decides_like_the_formal_network():
    """Soloveichik, Seelig & Winfree 2010 (the implementation converges to the formal
    kinetics as fuel grows): at leak 0 and fuel 100x the signals, the probability that the
    implementation's runs reach consensus on the majority equals the formal network's exact
    probability (crn.solvers.exact, first consensus). Tolerance: 99.9% two-sided binomial band for
    800 runs, 3.29 sqrt(p (1 - p) / 800), plus 0.01 for the finite fuel (derived: rates are
    off by ~ signal / fuel = 1% and the decision probability moves by less)."""
    n, gap, runs = 12, 2, 800
    formal = _am(n, gap)
    p_formal = exact_absorption(formal)[0]["X"]
    cells = ImplementedCells(InitialSplit(formal), "ssw",
                             DnaParameters(rate=RATE, concentration=C, fuel=100 * C))
    labels, _ = stochastic_decisions(cells(n, gap), runs, 200.0, 11)
    p_dna = sum(1 for x in labels if x == "X") / len(labels)
    band = 3.29 * math.sqrt(p_formal * (1 - p_formal) / runs) + 0.01
    assert 0.55 < p_formal < 0.95  # a cell where the decision is really in doubt
    assert abs(p_dna - p_formal) <= band
    assert all(x in ("X", "Y") for x in labels)  # every run decides, from the signals alone


def test_leak_threshold_of_the_mean_field_decision_matches_the_derivation():
    """derived: after the decision the leak makes Y at 3 L F^2 (one Y from X + Y -> Y + B's
    translator, two from Y + B -> 2 Y's) and B at 2 L F^2; X removes Y at k X Y and
    B at k X B (X ~ C), each Y removed making a B. So at steady state Y = 3 L F^2 / (k C),
    B = 5 L F^2 / (k C), and the minority molecules number (Y + B) n / C = 8 L e^2 n / k
    with e = F / C. The mean field decides while that is below one molecule: the critical
    leak is k / (8 e^2 n) = 25 /M/s at k = 1e5 /M/s, e = 5, n = 20."""
    formal = _am(20, 12)
    critical = RATE / (8 * 25 * 20)

    def at(leak):
        return diagnose(formal, "ssw", DnaParameters(rate=RATE, concentration=C, fuel=5 * C,
                                                     leak=leak), 200.0)

    assert at(0.8 * critical).reason == "decides"
    high = at(1.25 * critical)
    assert high.reason == "leak dominates" and high.time_without_leak is not None
    assert "leak dominates" in high.text()


def test_fuel_runs_out_is_diagnosed():
    """derived: X -> Y needs one gate per X; 200 X in volume 100 (twice the unit
    concentration C) against gates at 1.5 C (150 molecules) leave 50 X unconverted, so no
    consensus is ever reached (and no leak is to blame), while the formal network decides y."""
    from crn.core.network import Network, Reaction

    net = Network.from_reactions("convert", ["X", "Y"], [Reaction({"X": 1}, {"Y": 1}, 1.0)],
                                 volume=100, initial={"X": 200, "Y": 1},
                                 output={"X": "x", "Y": "y"})
    d = diagnose(net, "ssw", DnaParameters(rate=RATE, concentration=C, fuel=1.5 * C), 50.0)
    assert d.reason == "fuel runs out" and min(d.fuel_left.values()) < 0.05


def test_copies_never_decrease_with_leak():
    """Monotone in leak, checked at two leak levels (0 < 20 < 60 /M/s; the mean-field
    critical leak k / (8 e^2 n) of the test above is 62 /M/s at n = 8 and 21 /M/s at
    n = 24): the smallest population meeting the risk by the deadline never shrinks as the
    leak grows (None, no droplet size, counts as infinite). Same seed at every level; up to
    3000 runs per probe, so P(correct) is resolved to about +-0.004 (1 sd) around the target
    0.95, where the lattice values at n = 8 differ from it by ~3 sd at each level."""
    formal = InitialSplit(_am(20, 12))
    params = DnaParameters(rate=RATE, concentration=C, fuel=5 * C)
    found = []
    for leak in (0.0, 20.0, 60.0):
        result = implementation_copies(
            formal, "ssw", dataclass_replace(params, leak=leak), gap_fraction=0.5, risk=0.05,
            deadline=30.0, n_max=200, runs_max=3000, rng=5, with_formal=False)
        found.append(result)
    values = [math.inf if r.implemented.estimate is None else r.implemented.estimate
              for r in found]
    assert values[0] < math.inf  # without leak some droplet works
    assert values[0] <= values[1] <= values[2]
    assert values[2] == math.inf and found[2].diagnosis.reason == "leak dominates"


def dataclass_replace(obj, **changes):
    import dataclasses

    return dataclasses.replace(obj, **changes)


def test_fuel_for_time_finds_the_excess_and_its_bracket():
    """The 10% answer: the implementation's decision time at the answer is within 10% of the
    formal time, and at half the answer it is not (the answer is the bracket's top after
    refinement by a factor below 2)."""
    formal = _am(200, 20)
    params = DnaParameters(rate=1e4, concentration=C)
    answer = fuel_for_time(formal, "ssw", params, tolerance=0.1)
    assert answer.reason == "found"
    assert abs(answer.time - answer.formal_time) <= 0.1 * answer.formal_time
    below = [t for e, t in answer.tried if e < answer.excess / 1.2]
    assert below and all(t is None or abs(t - answer.formal_time) > 0.1 * answer.formal_time
                         for t in below[-1:])


def test_fuel_for_time_says_when_q_max_limits():
    """derived: at rate 1e6 /M/s and q_max 6e6 /M/s the sequestration factor (1 + 1/3)^2
    = 1.78 slows the decision whatever the fuel, so no excess is within 10%."""
    formal = _am(200, 20)
    params = DnaParameters(rate=1e6, concentration=C, max_rate=6e6)
    answer = fuel_for_time(formal, "ssw", params, excess_max=300)
    assert answer.excess is None and answer.reason == "excess_max"
    assert answer.time / answer.formal_time == pytest.approx(16 / 9, rel=0.05)


def test_leak_tolerance_bracket_is_consistent():
    formal = InitialSplit(_am(20, 12))
    params = DnaParameters(rate=RATE, concentration=C, fuel=5 * C)
    answer = leak_tolerance(formal, 20, 12, "ssw", params, risk=0.2, runs_max=100, rng=7,
                            leak_start=1.0, refine=1)
    assert answer.leak is not None and answer.failing is not None
    assert answer.leak < answer.failing
    # the mean field fails above its critical leak, 25 /M/s here (test above): no level
    # beyond it can stay ok
    assert answer.leak <= 25.0 * 1.25
    oks = {t["leak"]: t["ok"] for t in answer.tried}
    assert oks[0.0] and oks[answer.leak] and not oks[answer.failing]


def test_a_minority_molecule_held_in_a_gate_still_counts():
    """The last Y bound to the first gate of Y + X -> Y + B (H_r2 carries the Y strand)
    keeps the implementation out of consensus, as the formal state (X = 3, Y = 1) is;
    ignored, it would let a run reach a false consensus on X."""
    from crn.core.outcome import consensus_index

    cells = ImplementedCells(InitialSplit(_am(4, 2)), "ssw",
                             DnaParameters(rate=RATE, concentration=C))
    impl = cells.implementation(4, 2)
    net = impl.network
    x = np.array(net.initial, dtype=np.int64)
    x[net.index["Y"]] = 0
    x[net.index["H_r2"]] = 1
    assert consensus_index(net.species_label, x) == -1
    assert consensus_index(impl.formal.species_label, np.array([3, 0, 0])) == 0
    x[net.index["H_r2"]] = 0
    assert net.labels[consensus_index(net.species_label, x)] == "X"
    # a committed output stands for its products: O_r3 of X + B -> 2 X reports X
    assert net.labels[net.species_label[net.index["O_r3"]]] == "X"
    assert net.species_label[net.index["O_r1"]] == -1  # X + B: B reports nothing


def test_two_domain_decisions_ignore_released_strands(capsys):
    """Two-domain (Cardelli 2013): the released top strand <x2 t> (R2) carries no signal and
    releases none with a fuel, so it stays ignored (it accumulates, one per firing); the
    join output A, which a fork turns into products, stands for them. So the mean field
    decides as the formal network does (it would never decide if R2 blocked consensus)."""
    from crn.core.network import IGNORED

    cells = ImplementedCells(InitialSplit(_am(100, 20)), "two-domain",
                             DnaParameters(rate=RATE, concentration=C))
    net = cells(100, 20)
    assert net.species_label[net.index["R2_r1"]] == IGNORED
    assert net.labels[net.species_label[net.index["A_r3"]]] == "X"  # X + B -> 2 X
    obj = _run_json(capsys, ["ode", AM, "--implement", "two-domain", "--json"])
    assert obj["consensus"]["label"] == obj["formal_consensus"]["label"] == "X"


def test_fuel_left_of_an_ode_solve_is_one_at_the_start():
    cells = ImplementedCells(InitialSplit(_am(50, 10)), "ssw",
                             DnaParameters(rate=RATE, concentration=C))
    impl = cells.implementation(50, 10)
    result = solve_mean_field(impl.network, times=np.array([0.0]), until=1.0,
                              stop_at_consensus=False)
    assert all(v == pytest.approx(1.0) for v in fuel_left_ode(impl, result).values())
