"""Speed of the mean-field ODE engine on a large generated protocol, against GillesPy2's ODE.

The protocol is approximate majority on a ring of K levels: an agent is an
opinion (X, Y or blank B) and a level; two agents interact only when their
levels are within w of each other on the ring, and a responder that changes
takes the initiator's level. With the same count at every level the level
distribution stays uniform, so the mean field reaches consensus like
three-state approximate majority slowed by K / (2w + 1).

Goals: one right-hand side under 1 ms; the full solve to consensus at
least 10 times faster than GillesPy2's ODE solver. GillesPy2 evaluates every
propensity string in Python at each step, so it is timed on the largest
member of the same family it solves within about a minute, and our solver on
that same network.

Run: ``.venv/bin/python benchmarks/bench_ode.py``
"""

from __future__ import annotations

import time
import warnings

import numpy as np

from crn.core.generate import protocol_from_rule
from crn.core.translate import protocol_to_network
from crn.solvers.ode import initial_state, mean_field_system, solve_mean_field

BIG_LEVELS, BIG_WIDTH = 334, 40
GILLESPY2_BUDGET = 60.0


def ring_majority(levels: int, width: int, x_per_level: int = 60, y_per_level: int = 58):
    """The generated ring-level approximate-majority protocol as a network."""
    def rule(a, b):
        (o1, k1), (o2, k2) = a, b
        if min((k1 - k2) % levels, (k2 - k1) % levels) > width:
            return None
        if o1 != "B" and o2 != "B" and o1 != o2:
            return a, ("B", k1)
        if o1 != "B" and o2 == "B":
            return a, (o1, k1)
        return None

    initial = {}
    for k in range(levels):
        initial[("X", k)] = x_per_level
        initial[("Y", k)] = y_per_level
    protocol = protocol_from_rule(
        f"ring majority K={levels} w={width}", rule, initial,
        output=lambda s: None if s[0] == "B" else s[0], max_states=3 * levels + 1)
    return protocol_to_network(protocol)


def median_time(func, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return float(np.median(times))


def gillespy2_solve(net, until: float, rtol: float, atol: float) -> float:
    """Wall time of GillesPy2's ODESolver on ``net`` to ``until`` (101 output points)."""
    import gillespy2

    from crn.engines.gillespy2_bridge import to_gillespy2

    model = to_gillespy2(net)
    for name, value in zip(net.species, initial_state(net), strict=True):
        model.listOfSpecies[name].mode = "continuous"
        model.listOfSpecies[name].initial_value = float(value)
    model.timespan(np.linspace(0.0, until, 101))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        start = time.perf_counter()
        model.run(solver=gillespy2.ODESolver(model=model),
                  integrator_options={"rtol": rtol, "atol": atol})
        return time.perf_counter() - start


def main() -> None:
    rtol, atol = 1e-8, 1e-12
    t0 = time.perf_counter()
    big = ring_majority(BIG_LEVELS, BIG_WIDTH)
    print(f"network: {big.name}: {big.n_species} states, {big.n_reactions} reactions "
          f"(built in {time.perf_counter() - t0:.1f} s)")
    t0 = time.perf_counter()
    system = mean_field_system(big)
    print(f"compile (complexes: {system.complexes.shape[0]}): {time.perf_counter() - t0:.3f} s")
    y = initial_state(big)
    rhs_time = median_time(lambda: system.rhs(0.0, y), 200)
    jac_time = median_time(lambda: system.jacobian(0.0, y), 20)
    result = solve_mean_field(big, rtol=rtol, atol=atol)
    solve_time = median_time(lambda: solve_mean_field(big, rtol=rtol, atol=atol), 3)
    print(f"one right-hand side : {rhs_time * 1e3:8.3f} ms (median of 200; goal < 1 ms)")
    print(f"one Jacobian        : {jac_time * 1e3:8.3f} ms (median of 20)")
    print(f"solve to consensus  : {solve_time:8.3f} s  (median of 3; consensus on "
          f"{result.consensus.label} at t = {result.consensus.time:.4g}, "
          f"{result.times.size} steps, rtol {rtol:g})")

    # GillesPy2 on the largest member of the family it solves within the budget.
    print(f"\nGillesPy2 ODESolver (pure Python propensities), budget {GILLESPY2_BUDGET:.0f} s:")
    last = None
    for levels, width in ((4, 1), (8, 2), (16, 4), (32, 8), (64, 16), (128, 32), (334, 40)):
        net = ring_majority(levels, width)
        ours = solve_mean_field(net, rtol=rtol, atol=atol)
        until = ours.consensus.time
        theirs = gillespy2_solve(net, until, rtol, atol)
        ours_time = median_time(lambda net=net: solve_mean_field(net, rtol=rtol, atol=atol), 3)
        print(f"  K={levels:3d} w={width:2d}: {net.n_species:5d} states {net.n_reactions:7d} "
              f"reactions  GillesPy2 {theirs:8.3f} s  ours {ours_time:8.4f} s  "
              f"ratio {theirs / ours_time:8.1f}x")
        last = (net, theirs, ours_time)
        if theirs * 4 > GILLESPY2_BUDGET:
            break
    net, theirs, ours_time = last
    print(f"\nlargest network GillesPy2 solved within the budget: {net.n_species} states, "
          f"{net.n_reactions} reactions: ours is {theirs / ours_time:.1f}x faster (goal >= 10x)")
    print(f"right-hand side on the big network: {rhs_time * 1e3:.3f} ms "
          f"({'meets' if rhs_time < 1e-3 else 'misses'} the 1 ms goal)")


if __name__ == "__main__":
    main()
