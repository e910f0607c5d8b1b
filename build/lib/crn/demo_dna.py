"""The demo's section on the droplet assay's DNA implementation: fuel and leak.

Called by :func:`crn.demo.run_demo`; returns the ``dna`` part of its
``summary.json`` and writes ``dna_implementation.png``. The circuit is the
three-domain construction of Soloveichik, Seelig & Winfree (PNAS 107:5393,
2010) of the droplet's approximate-majority network, at the droplet's rate
constant and signal concentration.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

__all__ = ["DNA_SETTINGS", "dna_section"]

#: Full and quick settings of the DNA section (``quick`` for the test suite).
DNA_SETTINGS = {
    "full": dict(concentration="10nM", slow_rate="1e5/M/s", leaks=[10.0],
                 stochastic_fuel="100nM", gap_fraction=0.2, risk=0.01, copies_runs_max=400,
                 tolerance_n=60, tolerance_gap=30, tolerance_runs_max=400, n_max=1000),
    "quick": dict(concentration="10nM", slow_rate="1e5/M/s", leaks=[10.0],
                  stochastic_fuel="100nM", gap_fraction=0.4, risk=0.05, copies_runs_max=100,
                  tolerance_n=30, tolerance_gap=16, tolerance_runs_max=100, n_max=200),
}


def _figure(out: Path, impl, formal_result, result) -> Path:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from crn.io.atomic import atomic_path
    from crn.plots.implementation import plot_implementation

    ax = plot_implementation(impl, formal_result, result,
                             title="Droplet assay: formal network vs its DNA implementation "
                                   "(mean field)")
    path = out / "dna_implementation.png"
    with atomic_path(path) as tmp:
        ax.figure.savefig(tmp, dpi=150)
    plt.close(ax.figure)
    return path


def dna_section(out, net, *, n: int, gap: int, rate: float, deadline_seconds: float,
                quick: bool, seed, echo=print) -> dict:
    """Implement the droplet circuit in DNA and answer the designer's three questions.

    Parameters
    ----------
    out : Path
        Where ``dna_implementation.png`` goes.
    net : Network
        The droplet's formal network.
    n, gap : int
        The droplet population and gap of the mean-field comparison.
    rate : float
        /M/s that one unit of protocol rate stands for.
    deadline_seconds : float
    quick : bool
    seed : SeedSequence
    echo : callable

    Returns
    -------
    dict
        The ``dna`` record of ``summary.json``.
    """
    from crn.analyses.design_questions import fuel_for_time, implementation_copies, leak_tolerance
    from crn.analyses.implemented import formal_ode_horizon, fuel_left_ode, implementation_of
    from crn.analyses.probes import InitialSplit, gap_for_fraction
    from crn.core.units import (
        format_concentration,
        format_time,
        parse_concentration,
        parse_rate_constant,
    )
    from crn.dna import DnaParameters
    from crn.solvers.ode import solve_mean_field

    s = DNA_SETTINGS["quick" if quick else "full"]
    conc = parse_concentration(s["concentration"])
    params = DnaParameters(rate=rate, concentration=conc)
    cells = InitialSplit(net)
    formal = cells(n, gap)
    impl = implementation_of(formal, "ssw", params)
    roles = {}
    for role in impl.roles.values():
        roles[role] = roles.get(role, 0) + 1
    unit = params.seconds_per_time_unit
    echo(f"\n== The circuit in DNA: three-domain strand displacement (Soloveichik, Seelig & "
         f"Winfree 2010) at {format_concentration(conc)} signal ==")
    echo(f"  {impl.network.n_species} species ({roles.get('signal', 0)} signal, "
         f"{roles.get('fuel', 0)} fuel and gates at {format_concentration(params.fuel_molar)} "
         f"each, {roles.get('intermediate', 0)} intermediate, {roles.get('waste', 0)} waste), "
         f"{impl.network.n_reactions} reactions; q_max {params.q_max:.2g} /M/s (7-nt toeholds)")

    horizon = formal_ode_horizon(formal)
    formal_result = solve_mean_field(formal, until=horizon)
    result = solve_mean_field(impl.network, until=horizon)
    left = fuel_left_ode(impl, result)
    f_time, d_time = formal_result.consensus.time, result.consensus.time
    echo(f"  mean field, n = {n:,}, gap {gap}: formal decides {formal_result.consensus.label} "
         f"at {f_time:.3g} ({format_time(f_time * unit)}), the DNA circuit "
         f"{result.consensus.label} at {d_time:.3g} ({format_time(d_time * unit)}); "
         f"least fuel left {min(left.values()):.1%}")
    _figure(Path(out), impl, solve_mean_field(formal, until=1.5 * d_time,
                                              stop_at_consensus=False),
            solve_mean_field(impl.network, until=1.5 * d_time, stop_at_consensus=False))

    # (a) fuel for a decision within 10% of the formal time
    fast = fuel_for_time(formal, "ssw", params, excess_max=1000)
    slow_rate = parse_rate_constant(s["slow_rate"])
    slow = fuel_for_time(formal, "ssw", dataclasses.replace(params, rate=slow_rate),
                         excess_max=1000)
    echo("  fuel for a decision within 10% of the formal time:")
    if fast.excess is None:
        ratio = None if fast.time is None else fast.time / fast.formal_time
        echo(f"    at {rate:.0e} /M/s no fuel excess up to 1000x is enough"
             + ("" if ratio is None else f" (still {ratio:.2f}x slower)")
             + ": the gates' first step holds signal back at this rate (q_max only "
               f"{params.q_max / rate:.0f}x the formal rate)")
    else:
        echo(f"    at {rate:.0e} /M/s: {fast.excess:.3g}x the signal")
    if slow.excess is not None:
        echo(f"    at {slow_rate:.0e} /M/s (a slower design, 10x longer times): "
             f"{slow.excess:.3g}x the signal, {format_concentration(slow.fuel_molar)}")

    # (b) leak tolerance of one regime cell, (c) copies with leak, at a cheaper fuel
    fuel = parse_concentration(s["stochastic_fuel"])
    lean = dataclasses.replace(params, fuel=fuel)
    tol = leak_tolerance(cells, s["tolerance_n"], s["tolerance_gap"], "ssw", lean,
                         risk=s["risk"], runs_max=s["tolerance_runs_max"], rng=seed,
                         leak_start=0.01, refine=2)
    cell = f"the cell n = {tol.n}, gap {tol.gap}"
    if tol.leak is None:
        echo(f"  leak tolerance (gates at {format_concentration(fuel)}): {cell} is not ok at "
             f"risk {s['risk']:g} even without leak")
    else:
        echo(f"  leak tolerance (gates at {format_concentration(fuel)}): {cell} stays ok at "
             f"risk {s['risk']:g} up to a leak of {tol.leak:.3g} /M/s"
             + ("" if tol.failing is None else f" (not at {tol.failing:.3g} /M/s)")
             + "; typical leaks are 1-100 /M/s (crn.dna.LEAK_TYPICAL)")

    deadline = deadline_seconds * rate * conc
    fraction = s["gap_fraction"]
    copies = []
    echo(f"  copies for a {fraction:.0%} gap at risk {s['risk']:g} within "
         f"{format_time(deadline_seconds)} (gates at {format_concentration(fuel)}):")
    for leak in [0.0, *s["leaks"]]:
        answer = implementation_copies(
            cells, "ssw", dataclasses.replace(lean, leak=leak), gap_fraction=fraction,
            risk=s["risk"], deadline=deadline, n_max=s["n_max"],
            runs_max=s["copies_runs_max"], rng=seed, with_formal=leak == 0.0)
        got = answer.implemented
        row = dict(leak_per_molar_second=leak, copies=got.estimate, copies_low=got.low,
                   copies_high=got.high, median_time=got.median_time, verdict=answer.verdict,
                   reason=None if answer.diagnosis is None else answer.diagnosis.reason)
        if answer.formal is not None:
            row["formal_copies"] = answer.formal.estimate
            echo(f"    formal network: n = {_n(answer.formal.estimate)}")
        if got.estimate is None:
            why = "" if answer.diagnosis is None else f": {answer.diagnosis.text()}"
            echo(f"    leak {leak:g} /M/s: no droplet size works{why}")
        else:
            echo(f"    leak {leak:g} /M/s: n = {got.estimate:,} ({_n(got.low)}..{_n(got.high)}), "
                 f"median decision {format_time(got.median_time * unit)}"
                 if got.median_time else f"    leak {leak:g} /M/s: n = {got.estimate:,}")
        copies.append(row)
    echo(f"  figure: {Path(out) / 'dna_implementation.png'}")
    echo("  DNA numbers are model predictions of an idealised construction (no strand "
         "synthesis errors, spurious binding or gate degradation): validate them in the lab.")
    return {
        "scheme": "ssw",
        "parameters": params.as_dict(),
        "species": impl.network.n_species, "reactions": impl.network.n_reactions,
        "roles": roles,
        "mean_field": {"n": n, "gap": gap, "formal_time": f_time, "time": d_time,
                       "label": result.consensus.label, "fuel_left": left},
        "fuel_needed": {"rate_per_molar_second": rate, "excess": fast.excess,
                        "reason": fast.reason, "slow_rate_per_molar_second": slow_rate,
                        "slow_excess": slow.excess, "slow_fuel_molar": slow.fuel_molar},
        "leak_tolerance": {"n": tol.n, "gap": tol.gap, "risk": tol.risk,
                           "fuel_molar": fuel, "leak_per_molar_second": tol.leak,
                           "failing_per_molar_second": tol.failing},
        "copies": {"gap_fraction": fraction, "risk": s["risk"], "fuel_molar": fuel,
                   "deadline": deadline, "rows": copies,
                   "gap_at_copies": [None if r["copies"] is None
                                     else gap_for_fraction(r["copies"], fraction)
                                     for r in copies]},
    }


def _n(value):
    return "-" if value is None else f"{value:,}"
