"""Benchmark: a regime map on the ssw DNA implementation of approximate majority vs the formal map.

The same grid (by default the regime benchmark's: six populations from 1e2 to 1e7
and eight relative gaps), the same seed and worker count; prints the wall time of
each map, the ratio implementation / formal (goal: at most 3) and which model ran
the implementation's stochastic cells (``--full-network`` forces the whole network).

    python benchmarks/bench_implement.py [--n LIST] [--fractions LIST] [--runs-max R]
        [--fuel C] [--rate K] [--workers W] [--full-network]

Where the time goes (cProfile, cell by cell, on a shared two-core machine with a
load average of 8 to 9, so seconds are inflated and only their proportions count):

* The whole implementation network (37 species, 20 reactions at the default
  100-fold fuel) spends about 2 x fuel excess exact events per formal firing:
  the reversible first step X1 + L <-> H + B cycles against its buffer strand
  (n = 40: 17,000 events per run against 99 formal ones). That made the map on
  the full network about 100 times the formal one. The map now runs the reduced
  model (crn/dna/reduced.py: the bindings at quasi-steady state, Rao & Arkin
  2003) wherever every fuel is at least ten times the signal concentration:
  two slow events per formal firing (first step, output step).
* Below 5000 signal molecules the reduced model runs by the direct method,
  recomputing the quasi-steady state and all slow propensities after each
  event: about 3 to 4 times the direct method's cost per event, so a run costs
  about 9 times a formal direct run (n = 1000: 19 ms against 2.1 ms). From 5000
  molecules it runs in segments on the batched engine (crn/engines/segmented.py):
  about 10 to 30 segments per run, each a batched call plus about 1 ms of Python
  (protocol tables and network copies), so a run costs 1.4 times a formal
  direct run at n = 1e4, about 2 times a formal batched run at n = 1e5 and
  1.3 times at n = 1e6 (306 ms against 234 ms).
* Per cell, before any run: the configuration estimate that decides exact
  against stochastic (0.4 to 1.7 s; it took a minute at n = 1000 before the
  conservation-law count moved to floating point) and the implementation's
  mean field (0.3 s). The formal map pays neither at large n but has exact cells
  at n = 100 that the implementation (tens of thousands of fuel molecules)
  cannot have, so its n = 100 cells are stochastic.

Measured (same process, seed 2026, one worker, 1000 runs at most, machine loaded
by other jobs throughout, which also moved between the two maps):

* n = 100, 1e3, 1e4, 1e5 and the eight default gap fractions (27 cells after
  merging): formal 338 s, implementation 216 s, ratio 0.6, every cell with the
  same flag (the formal map shared the machine with a test run, so the ratio
  flatters the implementation);
* n = 1e6 and the eight gap fractions: formal 691 s, implementation 1067 s,
  ratio 1.5, every cell with the same flag (here the implementation map shared
  the machine with a full test-suite run, so the ratio is on the high side).

The default grid (up to 1e7) was not run within the session: its formal map
alone takes over an hour on this machine; the n = 1e7 runs go through the same
segmented path as n = 1e6.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from crn.analyses.implemented import ImplementedCells
from crn.analyses.probes import InitialSplit
from crn.analyses.regimes import regime_map
from crn.core.units import parse_concentration, parse_rate_constant
from crn.dna import DnaParameters
from crn.io.models import load_model

ROOT = Path(__file__).resolve().parent.parent
NS = [100, 1_000, 10_000, 100_000, 1_000_000, 10_000_000]
FRACTIONS = [0.0003, 0.001, 0.003, 0.01, 0.02, 0.05, 0.1, 0.3]


def run(cells, ns, fractions, runs_max, workers):
    started = time.perf_counter()
    result = regime_map(cells, ns, gap_fractions=fractions, runs_max=runs_max, rng=2026,
                        workers=workers)
    return time.perf_counter() - started, result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--n", default=",".join(str(n) for n in NS))
    parser.add_argument("--fractions", default=",".join(str(f) for f in FRACTIONS))
    parser.add_argument("--runs-max", type=int, default=1000)
    parser.add_argument("--fuel", default=None, help="fuel concentration (default 100x)")
    parser.add_argument("--rate", default="1e5/M/s")
    parser.add_argument("--concentration", default="10nM")
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--full-network", action="store_true",
                        help="run the implementation's stochastic cells on the full network")
    args = parser.parse_args()
    ns = [int(float(x)) for x in args.n.split(",")]
    fractions = [float(x) for x in args.fractions.split(",")]
    net = load_model(ROOT / "models" / "approximate_majority.toml").network
    formal = InitialSplit(net)
    params = DnaParameters(rate=parse_rate_constant(args.rate),
                           concentration=parse_concentration(args.concentration),
                           fuel=None if args.fuel is None else parse_concentration(args.fuel))
    cells = ImplementedCells(formal, "ssw", params, full_network=args.full_network)
    impl = cells.implementation(ns[0], ns[0] % 2 or 2)
    print(f"regime map: approximate majority, n = {ns}, gap fractions {fractions}, "
          f"runs_max {args.runs_max}, {args.workers} worker(s)")
    print(f"ssw implementation: {impl.network.n_species} species (formal "
          f"{net.n_species}), {impl.network.n_reactions} reactions (formal "
          f"{net.n_reactions}), fuel {params.fuel_molar:.3g} M "
          f"({params.fuel_molar / params.concentration:.0f}x), rate {params.rate:.3g} /M/s")
    t_formal, formal_map = run(formal, ns, fractions, args.runs_max, args.workers)
    print(f"formal map        : {t_formal:9.1f} s "
          f"({sum(c.method == 'exact' for c in formal_map.cells)} exact cells, "
          f"{sum(c.runs for c in formal_map.cells)} runs)")
    t_impl, impl_map = run(cells, ns, fractions, args.runs_max, args.workers)
    print(f"implementation map: {t_impl:9.1f} s "
          f"({sum(c.method == 'exact' for c in impl_map.cells)} exact cells, "
          f"{sum(c.runs for c in impl_map.cells)} runs)")
    models = cells.stochastic_models([(c.n, c.gap) for c in impl_map.cells
                                      if c.method == "stochastic"])
    print(f"stochastic cells on the reduced model: {len(models['reduced'])}, on the full "
          f"network: {len(models['full'])}")
    print(f"ratio implementation / formal: {t_impl / t_formal:.1f}   (goal <= 3)")
    same = sum(a.flag == b.flag for a, b in zip(formal_map.cells, impl_map.cells, strict=True))
    print(f"cells with the same flag: {same} of {len(impl_map.cells)}")


if __name__ == "__main__":
    main()
