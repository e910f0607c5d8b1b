"""A plain-Python direct method that draws as the numba kernels do, for run-by-run checks.

Gillespie, J. Phys. Chem. 81:2340, 1977: from state x, wait ``-log(1 - u1) / a0`` and fire
the first reaction (in search order) at which the running sum of propensities passes
``u2 * a0`` (the last positive one if rounding leaves it short). The kernels draw u1, u2 in
that order from the generator they are given, so the same seed gives the same run here,
step for step: everything but the propensities is computed independently of the engines
(state updates, sample recording, consensus by the rule of crn.core.outcome, search order).
"""

import math

import numpy as np


def mass_action(net):
    """Propensities of a network at x, as the direct method defines them: the rate constant
    ``k / v**(order - 1)`` times the falling factorial of each reactant's count."""
    c = net.rates / net.volume ** (net.orders.astype(np.float64) - 1.0)
    sides = [list(r.reactants.items()) for r in net.reactions()]
    index = net.index

    def propensities(x):
        out = []
        for j, side in enumerate(sides):
            a = c[j]
            for s, m in side:
                xs = int(x[index[s]])
                if xs < m:
                    a = 0.0
                    break
                for i in range(m):
                    a *= float(xs - i)
            out.append(a)
        return out

    return propensities


def net_changes(net):
    """Net change of each reaction of a network, as integer vectors over its species."""
    out = []
    for r in net.reactions():
        d = np.zeros(net.n_species, dtype=np.int64)
        for s, m in r.reactants.items():
            d[net.index[s]] -= m
        for s, m in r.products.items():
            d[net.index[s]] += m
        out.append(d)
    return out


def consensus_label(x, species_label):
    """The label every present species reports, -1 for none (rule of crn.core.outcome)."""
    present = {int(k) for k, n in zip(species_label, x, strict=True) if n > 0 and k != -2}
    return present.pop() if len(present) == 1 and -1 not in present else -1


def run_by_hand(propensities, changes, species_label, x0, *, until, times, seed,
                stop_at_consensus=False, sorting=False):
    """One run; ``sorting`` moves each fired reaction one place forward in the search order
    (the sorting direct method). Returns (counts, first label, its time, last label, events,
    end time, status) as the kernels do."""
    rng = np.random.default_rng(seed)
    x = np.array(x0, dtype=np.int64)
    counts = np.empty((len(times), x.shape[0]), dtype=np.int64)
    order = list(range(len(changes)))
    first = consensus_label(x, species_label)
    first_time = 0.0 if first >= 0 else math.nan
    t, events, k = 0.0, 0, 0
    status = "consensus" if stop_at_consensus and first >= 0 else None
    while status is None:
        a = propensities(x)
        a0 = 0.0
        for value in a:  # summed in reaction order, as the kernels sum
            a0 += value
        if not any(value > 0.0 for value in a):
            status = "silent"
            break
        t_next = t - math.log(1.0 - rng.random()) / a0
        if t_next > until:
            break
        while k < len(times) and times[k] < t_next:
            counts[k] = x
            k += 1
        target = rng.random() * a0
        acc, pos = 0.0, -1
        for p, j in enumerate(order):
            if a[j] > 0.0:
                pos = p
                acc += a[j]
                if acc > target:
                    break
        r = order[pos]
        if sorting and pos > 0:
            order[pos - 1], order[pos] = r, order[pos - 1]
        x = x + changes[r]
        t = t_next
        events += 1
        label = consensus_label(x, species_label)
        if label >= 0 and first < 0:
            first, first_time = label, t
            if stop_at_consensus:
                status = "consensus"
    end_time = t if status is not None else until
    counts[k:] = x
    return (counts, first, first_time, consensus_label(x, species_label), events, end_time,
            status or "horizon")
