"""Batched exact simulation of population protocols with huge populations (numba).

The engine follows Berenbrink, Hammer, Kaaser, Meyer, Penschuck and Tran
(ESA 2020). A run of interactions in which no agent takes part twice is
*collision-free*; the agents of such a run are a uniform sample without
replacement, so the run is simulated in bulk:

1. its length L has the birthday-problem law
   ``P(L >= l) = prod_{i<l} (n-2i)(n-2i-1) / (n(n-1))``, sampled by inversion
   in log space (Stirling differences, accurate up to n = 2**60);
2. the initiators' states are multivariate hypergeometric among all agents,
   the responders' states among the rest, and their pairing is a uniformly
   random matching, sampled one initiator state at a time;
3. all L transitions are applied at once (randomized outcomes by binomial
   splitting), then the interaction that collides with an agent of the run,
   with the right law of which agents collide.

With many states (from 16) and a run short enough to match agent by agent, the
2 l agents of the run are drawn at once instead (one multivariate
hypergeometric draw) and a uniformly random ordered half of them, chosen by a
partial shuffle, are the responders: the same law with one draw per state
fewer. While no consensus can arise inside a batch, each interaction is then
applied at once from a packed table entry for its ordered state pair.

Only state pairs that can change anything are visited: for an initiator state
the responders that give a null interaction with it are drawn as one group,
and the group is split only into the states that a later initiator state
still needs. When a batch would carry few non-null interactions (near
consensus or silence), the engine switches to stepping from one non-null
interaction to the next, skipping the null ones in one draw.

Time is exact in distribution on both clocks. In continuous time (the
default) interactions form a Poisson process of rate n per unit of parallel
time: a batch of m interactions takes a Gamma(m, 1/n) time, a batch that
crosses a sample time keeps the Binomial number of its interactions that fall
before it, and a first consensus or silence inside a batch gets its exact
position from the uniformly random order of the batch's interactions. In
discrete time interaction k happens at parallel time k / n.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.core.outcome import RunOutcome, consensus_index
from crn.core.translate import network_to_protocol
from crn.engines.base import Trajectory
from crn.engines.hypergeometric import (
    MAX_POPULATION,
    _lgamma_excess,
    hypergeometric_draw,
    log_factorial_ratio,
    multivariate_hypergeometric_draw,
)

__all__ = ["run_batched", "protocol_tables", "DEFAULT_BATCH_THRESHOLD"]

#: Below this expected number of non-null interactions per batch the engine steps
#: from one non-null interaction to the next instead of batching.
DEFAULT_BATCH_THRESHOLD = 8.0

_STATUS = ("horizon", "silent", "consensus")
_EXACT_SMALL_N = 2**20  # below this population the birthday law uses plain lgamma
_REWEIGH_EVERY = 16  # batches between sums of the non-null weight while batching pays
_STEPS_CAP = 2**62
_AGENT_PAIRING_MAX = 2**22  # longest run matched agent by agent (memory: 4 bytes each)
# Match agent by agent when the run is shorter than this many times the state pairs
# to visit (the cost of a hypergeometric draw in shuffle steps, measured on one core).
_AGENT_FACTOR = 10.0
# From this many states, a batch matched agent by agent draws its 2 l agents in one
# multivariate hypergeometric draw and splits them by a shuffle, instead of drawing the
# initiators and then the responders (one draw per state fewer; a different stream of
# random numbers for the same law, so protocols with fewer states keep their runs).
_JOINT_FROM_STATES = 16
_PACK = 1 << 16  # packed outcome codes a * _PACK + b need fewer states than this


# --------------------------------------------------------------------------- tables
def protocol_tables(net: Network) -> dict:
    """Transition tables of the protocol a network runs as, for the kernels.

    The network is converted with :func:`crn.core.translate.network_to_protocol`.
    Outcomes that leave the counts unchanged are dropped, and for each
    unordered pair {p, q} the outcome probabilities of (p, q) and (q, p) are
    repacked greedily into the two orders (capacity one each). Only the sum over
    both orders enters the law of the counts (either order is drawn with the
    same probability), so the repacked protocol has the same count process and
    more deterministic transitions.

    Parameters
    ----------
    net : Network
        From a protocol, or with two-reactant two-product reactions only.

    Returns
    -------
    dict
        ``time_scale`` (parallel time per unit of network time) and int64 /
        float64 arrays: ``w`` (S*S total non-null probability of each ordered
        pair), ``det`` (index of a probability-one outcome or -1), ``out_ptr``,
        ``out_c``, ``out_d``, ``out_p`` (outcomes, CSR by pair), ``nn_ptr``,
        ``nn_q`` (responder states with a non-null transition, CSR by
        initiator), ``rows`` (initiator states with any), ``res_ptr``,
        ``res_q`` (per row: states a later row still needs counted), ``code``
        (per ordered pair: -1 null, -2 randomized, else the deterministic
        outcome packed as ``a * 2**16 + b``, or ``-3 - o`` for its index o
        from 2**16 states on).

    Raises
    ------
    ModelError
        If a reaction is not two-in two-out.
    """
    protocol, time_scale = network_to_protocol(net)
    index = {s: i for i, s in enumerate(net.species)}
    n_states = len(net.species)
    merged: dict[tuple[int, int], dict[tuple[int, int], float]] = {}
    for (a, b), outcomes in protocol.transitions.items():
        p, q = index[a], index[b]
        for o in outcomes:
            c, d = index[o.initiator], index[o.responder]
            if o.probability <= 0 or sorted((c, d)) == sorted((p, q)):
                continue
            key = (min(p, q), max(p, q))
            product = (min(c, d), max(c, d))
            merged.setdefault(key, {})
            merged[key][product] = merged[key].get(product, 0.0) + o.probability
    table: dict[tuple[int, int], list[tuple[int, int, float]]] = {}
    for (p, q), products in sorted(merged.items()):
        orders = [(p, q)] if p == q else [(p, q), (q, p)]
        room = [1.0] * len(orders)
        for (c, d), prob in sorted(products.items()):
            for side, pair in enumerate(orders):
                take = min(prob, room[side])
                if take > 1e-15:
                    table.setdefault(pair, []).append((c, d, take))
                    room[side] -= take
                    prob -= take
            # prob left over here is rounding beyond the protocol's own 1e-12 slack
    w = np.zeros(n_states * n_states)
    det = np.full(n_states * n_states, -1, dtype=np.int64)
    out_ptr = np.zeros(n_states * n_states + 1, dtype=np.int64)
    out_c, out_d, out_p = [], [], []
    for pq in range(n_states * n_states):
        outs = table.get(divmod(pq, n_states), [])
        total = sum(pr for *_, pr in outs)
        if total > 1.0:
            outs = [(c, d, pr / total) for c, d, pr in outs]
        if len(outs) == 1 and outs[0][2] >= 1.0 - 1e-12:
            outs = [(outs[0][0], outs[0][1], 1.0)]
            det[pq] = len(out_c)
        for c, d, pr in outs:
            out_c.append(c)
            out_d.append(d)
            out_p.append(pr)
        w[pq] = min(1.0, sum(pr for *_, pr in outs))
        out_ptr[pq + 1] = len(out_c)
    partners = [[q for q in range(n_states) if w[p * n_states + q] > 0] for p in range(n_states)]
    nn_ptr = np.zeros(n_states + 1, dtype=np.int64)
    for p in range(n_states):
        nn_ptr[p + 1] = nn_ptr[p] + len(partners[p])
    nn_q = np.array([q for p in range(n_states) for q in partners[p]], dtype=np.int64)
    # Rows with many partners first: their null group then holds few states a
    # later row needs, and the rows left at the end need few states counted.
    rows = sorted((p for p in range(n_states) if partners[p]), key=lambda p: (-len(partners[p]), p))
    res_ptr = np.zeros(len(rows) + 1, dtype=np.int64)
    res_q: list[int] = []
    later: set[int] = set()
    resolve: list[list[int]] = []
    for p in reversed(rows):
        resolve.append(sorted(later - set(partners[p])))
        later |= set(partners[p])
    resolve.reverse()
    for r, states in enumerate(resolve):
        res_q.extend(states)
        res_ptr[r + 1] = len(res_q)
    # one lookup per interaction on the fast path: -1 null, -2 randomized, else a * _PACK + b
    code = np.full(n_states * n_states, -2, dtype=np.int64)
    code[w <= 0] = -1
    for pq in np.flatnonzero(det >= 0):
        o = det[pq]
        code[pq] = out_c[o] * _PACK + out_d[o] if n_states < _PACK else -3 - o
    return {
        "time_scale": float(time_scale),
        "w": w,
        "code": code,
        "det": det,
        "out_ptr": out_ptr,
        "out_c": np.array(out_c, dtype=np.int64),
        "out_d": np.array(out_d, dtype=np.int64),
        "out_p": np.array(out_p, dtype=np.float64),
        "nn_ptr": nn_ptr,
        "nn_q": nn_q,
        "rows": np.array(rows, dtype=np.int64),
        "res_ptr": res_ptr,
        "res_q": np.array(res_q, dtype=np.int64),
    }


# --------------------------------------------------------------------------- kernels
@numba.njit(cache=True)
def _log_falling(n, k):
    """``ln(n! / ((n-k)! n**k))`` = sum_{i<k} log1p(-i/n), accurate for n up to 2**60."""
    if n < _EXACT_SMALL_N or n - k + 1 < 64:
        return log_factorial_ratio(n, n - k) - k * math.log(n)
    return k * math.log1p((1.0 - k) / n) + _lgamma_excess(float(n - k) + 1.0, float(k))


@numba.njit(cache=True)
def _birthday_tail(n, ell):
    """``-ln P(L >= ell)`` for the collision-free run length L among n agents."""
    return -_log_falling(n, 2 * ell) + ell * math.log1p(-1.0 / n)


@numba.njit(cache=True)
def _collision_free_length(rng, n, cap):
    """Largest l <= cap with P(L >= l) >= U (inversion; l >= 1 always)."""
    e = rng.standard_exponential()
    if _birthday_tail(n, cap) <= e:
        return cap
    # -ln P(L >= l) = (2 l^2 - 2 l) / n + 4 l^3 / (3 n^2) + ...: start from its root
    fn = float(n)
    ell_f = 0.5 * (1.0 + math.sqrt(1.0 + 2.0 * e * fn))
    for _ in range(2):
        poly = (2.0 * ell_f * ell_f - 2.0 * ell_f) / fn + 4.0 * ell_f ** 3 / (3.0 * fn * fn) - e
        ell_f -= poly / ((4.0 * ell_f - 2.0) / fn + 4.0 * ell_f * ell_f / (fn * fn))
    ell = min(max(int(ell_f), 1), cap - 1)
    h = _birthday_tail(n, ell)
    # exact steps: P(L >= l + 1) / P(L >= l) = (1 - 2l/n)(1 - 2l/(n-1))
    if h <= e:
        while True:
            up = h - math.log1p(-2.0 * ell / fn) - math.log1p(-2.0 * ell / (fn - 1.0))
            if up > e:
                return ell
            ell += 1
            h = up
            if ell >= cap:
                return cap
    while ell > 1:
        ell -= 1
        h += math.log1p(-2.0 * ell / fn) + math.log1p(-2.0 * ell / (fn - 1.0))
        if h <= e:
            return ell
    return 1


@numba.njit(cache=True)
def _kth_of_subset(rng, ell, m, kth):
    """The kth smallest element of a uniformly random m-subset of {1, ..., ell}."""
    base = 0
    while True:
        if m == ell:
            return base + kth
        if m == 1:
            return base + 1 + min(int(rng.random() * ell), ell - 1)
        half = ell // 2
        low = hypergeometric_draw(rng, m, half, ell)
        if low >= kth:
            ell = half
            m = low
        else:
            base += half
            kth -= low
            m -= low
            ell -= half


@numba.njit(cache=True)
def _pick(rng, counts, total):
    """A state drawn with probability counts[s] / total."""
    r = min(int(rng.random() * total), total - 1)
    last = -1
    for s in range(counts.shape[0]):
        if counts[s] > 0:
            last = s
            if r < counts[s]:
                return s
            r -= counts[s]
    return last


@numba.njit(cache=True)
def _reached(time, t, steps, n, discrete):
    """Whether the clock has reached ``time`` (interaction floor(time n) on the discrete one)."""
    if discrete:
        return float(steps) >= math.floor(time * n)
    return t >= time


@numba.njit(cache=True)
def _weight(c, n_states, w, nn_ptr, nn_q):
    """Sum over ordered state pairs of c_p (c_q - [p = q]) w_pq (n(n-1) P(non-null))."""
    total = 0.0
    for p in range(n_states):
        cp = c[p]
        if cp == 0:
            continue
        for i in range(nn_ptr[p], nn_ptr[p + 1]):
            q = nn_q[i]
            cq = c[q] - 1 if q == p else c[q]
            if cq > 0:
                total += w[p * n_states + q] * float(cp) * float(cq)
    return total


@numba.njit(cache=True)
def _apply(c, p, q, a, b, y):
    c[p] -= y
    c[q] -= y
    c[a] += y
    c[b] += y


@numba.njit(cache=True)
def _sequential_event(rng, c, n_states, total, w, out_ptr, out_c, out_d, out_p, nn_ptr, nn_q):
    """Fire one non-null interaction, chosen with probability proportional to its weight."""
    target = rng.random() * total
    acc = 0.0
    lp, lq = -1, -1
    for p in range(n_states):
        cp = c[p]
        if cp == 0:
            continue
        for i in range(nn_ptr[p], nn_ptr[p + 1]):
            q = nn_q[i]
            cq = c[q] - 1 if q == p else c[q]
            if cq > 0:
                lp, lq = p, q
                acc += w[p * n_states + q] * float(cp) * float(cq)
                if acc > target:
                    break
        if acc > target:
            break
    p, q = lp, lq
    pq = p * n_states + q
    r = rng.random() * w[pq]
    j = out_ptr[pq]
    acc = 0.0
    for i in range(out_ptr[pq], out_ptr[pq + 1]):
        acc += out_p[i]
        j = i
        if r < acc:
            break
    _apply(c, p, q, out_c[j], out_d[j], 1)


@numba.njit(cache=True)
def _pair_cells(rng, n_states, ell, ini, pool, rows, nn_ptr, nn_q, res_ptr, res_q, w, det,
                out_ptr, out_p, label, bad, grp_pq, grp_o, grp_y):
    """Match initiators to responders one initiator state at a time, by counts.

    For initiator state p the responders are drawn (multivariate
    hypergeometric) among the states q with a non-null (p, q) one by one and,
    as a single group, among the rest; the group is then split only into the
    states a later initiator state reads. Non-null counts are split among
    the outcomes by binomial draws into groups (pair, outcome, count).

    Returns
    -------
    groups : int
    bad_seen : int
        Agents not reporting ``label`` in the visited pairs (``label >= 0``).
    broken : bool
        Some visited null pair holds such an agent.
    """
    groups = 0
    bad_seen = 0
    broken = False
    pool_total = ell
    for r in range(rows.shape[0]):
        p = rows[r]
        m = ini[p]
        if m == 0:
            continue
        left = pool_total
        for i in range(nn_ptr[p], nn_ptr[p + 1]):
            if m == 0:
                break
            q = nn_q[i]
            kq = pool[q]
            if kq == 0:
                continue
            x = hypergeometric_draw(rng, m, kq, left)
            left -= kq
            if x == 0:
                continue
            pool[q] = kq - x
            m -= x
            pq = p * n_states + q
            d = det[pq]
            left_x = x
            if d >= 0:
                grp_pq[groups] = pq
                grp_o[groups] = d
                grp_y[groups] = x
                groups += 1
                left_x = 0
            else:
                remaining_p = 1.0
                for j in range(out_ptr[pq], out_ptr[pq + 1]):
                    if left_x == 0:
                        break
                    prob = out_p[j] / remaining_p if remaining_p > 0.0 else 1.0
                    y = rng.binomial(left_x, prob) if prob < 1.0 else left_x
                    remaining_p -= out_p[j]
                    if y > 0:
                        grp_pq[groups] = pq
                        grp_o[groups] = j
                        grp_y[groups] = y
                        groups += 1
                        left_x -= y
            if label >= 0:
                bp = bad[p] + bad[q]
                bad_seen += bp * x
                if bp > 0 and left_x > 0:
                    broken = True
        # the m others met responders giving a null interaction with p: count only
        # the states a later initiator state still reads
        for i in range(res_ptr[r], res_ptr[r + 1]):
            if m == 0:
                break
            q = res_q[i]
            kq = pool[q]
            if kq == 0:
                continue
            x = hypergeometric_draw(rng, m, kq, left)
            left -= kq
            pool[q] = kq - x
            m -= x
        pool_total -= ini[p]
    return groups, bad_seen, broken


@numba.njit(cache=True)
def _splitmix64(state):
    """Next state and output of the splitmix64 generator (Steele, Lea, Flood 2014)."""
    state = state + np.uint64(0x9E3779B97F4A7C15)
    z = state
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return state, z ^ (z >> np.uint64(31))


@numba.njit(cache=True)
def _below(state, bound):
    """A uniform integer in [0, bound), bound < 2**32, by Lemire's multiply-and-reject."""
    state, z = _splitmix64(state)
    product = (z >> np.uint64(32)) * bound
    if (product & np.uint64(0xFFFFFFFF)) < bound:  # rarely: reject the biased low part
        threshold = (np.uint64(4294967296) - bound) % bound
        while (product & np.uint64(0xFFFFFFFF)) < threshold:
            state, z = _splitmix64(state)
            product = (z >> np.uint64(32)) * bound
    return state, product >> np.uint64(32)


@numba.njit(cache=True)
def _shuffle_front(rng, arr, total, count):
    """Put a uniformly random ordered sample of ``count`` of ``arr[:total]`` in front.

    A partial Fisher-Yates shuffle drawing from a splitmix64 stream seeded from
    the Generator (53 bits).
    """
    state = np.uint64(rng.random() * 9007199254740992.0)
    for i in range(count):
        state, offset = _below(state, np.uint64(total - i))
        j = i + np.int64(offset)
        t = arr[j]
        arr[j] = arr[i]
        arr[i] = t


@numba.njit(cache=True)
def _random_outcome(rng, pq, out_ptr, out_p):
    """Index of the outcome of a randomized pair, or -1 for a null interaction."""
    u = rng.random()
    acc = 0.0
    for j in range(out_ptr[pq], out_ptr[pq + 1]):
        acc += out_p[j]
        if u < acc:
            return j
    return -1


@numba.njit(cache=True)
def _pair_agents(rng, n_states, ell, ini, res, rows, w, det, code, out_ptr, out_c, out_d, out_p,
                 label, bad, resp, grp_slot, grp_pq, grp_o, grp_y, c):
    """Match initiators to responders agent by agent (a partial random shuffle).

    Same results as :func:`_pair_cells`; cheaper when the state pairs to visit
    outnumber the interactions. Returns as :func:`_pair_sequence`.
    """
    k = 0
    for s in range(n_states):
        for _ in range(res[s]):
            resp[k] = s
            k += 1
    _shuffle_front(rng, resp, ell, ell)
    return _pair_sequence(rng, n_states, ini, rows, resp, w, det, code, out_ptr, out_c, out_d,
                          out_p, label, bad, grp_slot, grp_pq, grp_o, grp_y, c)


@numba.njit(cache=True)
def _draw_joint(rng, c, ell, drawn, arr, ini, res):
    """Draw the 2 ell agents of a batch at once; the responders, shuffled, fill ``arr[:ell]``.

    The agents are a multivariate hypergeometric sample of 2 ell; a uniformly
    random ordered half of them are the responders and the rest the initiators,
    which is the law of drawing the initiators and then the responders.
    """
    multivariate_hypergeometric_draw(rng, c, 2 * ell, drawn)
    k = 0
    for s in range(c.shape[0]):
        for _ in range(drawn[s]):
            arr[k] = s
            k += 1
        res[s] = 0
    _shuffle_front(rng, arr, 2 * ell, ell)
    for i in range(ell):
        res[arr[i]] += 1
    for s in range(c.shape[0]):
        ini[s] = drawn[s] - res[s]


@numba.njit(cache=True)
def _pair_sequence(rng, n_states, ini, rows, resp, w, det, code, out_ptr, out_c, out_d, out_p,
                   label, bad, grp_slot, grp_pq, grp_o, grp_y, c):
    """Pair the initiators, row by row, with the shuffled responders ``resp`` in turn.

    Without a consensus label to watch (``label < 0``) the transitions are
    applied to ``c`` as they are drawn and no groups are formed.

    Returns
    -------
    groups, bad_seen, broken
        As for :func:`_pair_cells`.
    applied : int
        Non-null interactions already applied to ``c`` (``label < 0``).
    """
    groups = 0
    bad_seen = 0
    broken = False
    applied = 0
    i = 0
    if label < 0:
        for r in range(rows.shape[0]):
            p = rows[r]
            base = p * n_states
            for _ in range(ini[p]):
                q = resp[i]
                i += 1
                pq = base + q
                cd = code[pq]
                if cd == -1:
                    continue
                if cd >= 0:
                    a = cd >> 16
                    b = cd & 0xFFFF
                else:
                    o = _random_outcome(rng, pq, out_ptr, out_p) if cd == -2 else -3 - cd
                    if o < 0:
                        continue
                    a = out_c[o]
                    b = out_d[o]
                c[p] -= 1
                c[q] -= 1
                c[a] += 1
                c[b] += 1
                applied += 1
        return groups, bad_seen, broken, applied
    for r in range(rows.shape[0]):
        p = rows[r]
        for _ in range(ini[p]):
            q = resp[i]
            i += 1
            pq = p * n_states + q
            o = -1
            if w[pq] > 0.0:
                o = det[pq]
                if o < 0:
                    o = _random_outcome(rng, pq, out_ptr, out_p)
            bp = bad[p] + bad[q]
            bad_seen += bp
            if bp > 0 and o < 0:
                broken = True
            if o >= 0:
                g = grp_slot[o]
                if g < 0:
                    g = groups
                    grp_slot[o] = g
                    grp_pq[g] = pq
                    grp_o[g] = o
                    grp_y[g] = 0
                    groups += 1
                grp_y[g] += 1
    for g in range(groups):
        grp_slot[grp_o[g]] = -1
    return groups, bad_seen, broken, applied


@numba.njit(cache=True, nogil=True)  # nogil: Ctrl-C is seen during a run
def _kernel(rng, n_states, w, det, code, out_ptr, out_c, out_d, out_p, nn_ptr, nn_q, rows,
            res_ptr, res_q, species_label, x0, times, until, stop_at_consensus, discrete,
            threshold, agent_factor, joint_states):
    n = 0
    for s in range(n_states):
        n += x0[s]
    nt = times.shape[0]
    counts = np.empty((nt, n_states), dtype=np.int64)
    c = x0.copy()
    bad = np.zeros(n_states, dtype=np.int64)
    ini = np.zeros(n_states, dtype=np.int64)
    res = np.zeros(n_states, dtype=np.int64)
    rest = np.zeros(n_states, dtype=np.int64)
    untouched = np.zeros(n_states, dtype=np.int64)
    pool = np.zeros(n_states, dtype=np.int64)
    touched = np.zeros(n_states, dtype=np.int64)
    resp = np.zeros(0, dtype=np.int32)
    drawn = np.zeros(n_states, dtype=np.int64)
    work_all = 0  # state pairs a batch with every initiator state present visits
    for r in range(rows.shape[0]):
        work_all += nn_ptr[rows[r] + 1] - nn_ptr[rows[r]] + res_ptr[r + 1] - res_ptr[r]
    n_groups = out_c.shape[0]
    grp_pq = np.zeros(n_groups, dtype=np.int64)
    grp_o = np.zeros(n_groups, dtype=np.int64)
    grp_y = np.zeros(n_groups, dtype=np.int64)
    grp_kind = np.zeros(n_groups, dtype=np.int64)  # 0 neutral change, 1 fixes (A), 2 breaks (B)
    neutral = np.zeros(n_groups + 1, dtype=np.int64)
    neutral_pick = np.zeros(n_groups + 1, dtype=np.int64)
    grp_slot = np.full(n_groups, -1, dtype=np.int64)

    first = consensus_index(species_label, c)
    first_time = 0.0 if first >= 0 else np.nan
    events = 0
    t = 0.0  # parallel time (continuous clock)
    steps = 0  # interactions so far (discrete clock)
    cap = (n - 1) // 2  # keeps at least one agent out of every batch
    mean_len = math.sqrt(math.pi * n / 8.0)
    # the last non-null interaction, for the time of silence
    last_time = 0.0
    last_pending = False
    last_m = 0
    last_ell = 0
    last_span = 0.0
    last_unif = 0
    last_t0 = 0.0
    last_s0 = 0
    status = 0
    k = 0
    weight = 0.0
    weight_age = 0
    reweigh = 1
    per_batch = 0.0
    if first >= 0 and stop_at_consensus:
        status = 2
    while status == 0:
        while k < nt and _reached(times[k], t, steps, n, discrete):
            counts[k] = c
            k += 1
        if _reached(until, t, steps, n, discrete):
            if n < 2 or _weight(c, n_states, w, nn_ptr, nn_q) <= 0.0:
                status = 1  # fell silent before the horizon (perhaps between re-sums)
            break
        tau = until
        if k < nt and times[k] < tau:
            tau = times[k]
        tau_steps = 0
        if discrete:
            tau_steps = _STEPS_CAP
            if tau * n < _STEPS_CAP:
                tau_steps = int(math.floor(tau * n))
        # The weight (hence the mode and silence) is re-summed after every event while
        # stepping, and every few batches while batches carry many non-null interactions;
        # a late re-sum costs only time, never exactness.
        weight_age += 1
        if weight_age >= reweigh:
            weight = _weight(c, n_states, w, nn_ptr, nn_q) if n >= 2 else 0.0
            weight_age = 0
            if weight <= 0.0:
                status = 1
                break
            per_batch = mean_len * weight / (float(n) * float(n - 1))
            reweigh = _REWEIGH_EVERY if per_batch > 64.0 * (threshold + 1.0) else 1
        if cap < 1 or per_batch < threshold:
            # ---- one non-null interaction, skipping the null ones in one draw
            if discrete:
                prob = min(1.0, weight / (float(n) * float(n - 1)))
                if prob >= 1.0:
                    gap = 1.0
                else:
                    gap = 1.0 + math.floor(math.log(1.0 - rng.random()) / math.log1p(-prob))
                if gap > float(tau_steps - steps):
                    steps = tau_steps
                    t = steps / n
                    continue
                steps += int(gap)
                t = steps / n
            else:
                dt = rng.standard_exponential() * float(n - 1) / weight
                if t + dt >= tau:
                    t = tau
                    continue
                t += dt
            _sequential_event(rng, c, n_states, weight, w, out_ptr, out_c, out_d, out_p,
                              nn_ptr, nn_q)
            events += 1
            reweigh = 1
            last_pending = False
            last_time = t
            if first < 0:
                lab = consensus_index(species_label, c)
                if lab >= 0:
                    first = lab
                    first_time = t
                    if stop_at_consensus:
                        status = 2
            continue

        # ---- a batch: a collision-free run, then (unless cut) the colliding interaction
        ell = _collision_free_length(rng, n, cap)
        collide = ell < cap
        m_int = ell + 1 if collide else ell
        t0 = t
        s0 = steps
        cut = False
        span = 0.0
        unif = m_int - 1  # all but the last interaction fall uniformly inside the span
        if discrete:
            if steps + m_int > tau_steps:
                cut = True
                ell = tau_steps - steps  # < m_int: within the collision-free run
        else:
            span = rng.standard_gamma(float(m_int)) / n
            if t + span >= tau:
                # keep the interactions before tau: given the span, the first m_int - 1
                # arrival times are uniform on it
                cut = True
                full = span
                span = tau - t
                ell = rng.binomial(m_int - 1, min(1.0, span / full))
                unif = ell
        if ell > 0:
            joint = (n_states >= joint_states and ell <= _AGENT_PAIRING_MAX
                     and ell < agent_factor * work_all)
            if joint:
                if resp.shape[0] < 2 * ell:
                    resp = np.empty(max(2 * ell, 2 * resp.shape[0]), dtype=np.int32)
                _draw_joint(rng, c, ell, drawn, resp, ini, res)
            else:
                multivariate_hypergeometric_draw(rng, c, ell, ini)
                for s in range(n_states):
                    rest[s] = c[s] - ini[s]
                multivariate_hypergeometric_draw(rng, rest, ell, res)
            for s in range(n_states):
                untouched[s] = c[s] - ini[s] - res[s]
                pool[s] = res[s]
                touched[s] = ini[s] + res[s]
            # -- consensus inside the collision-free run needs the label of the untouched
            label = -1
            if first < 0:
                label = consensus_index(species_label, untouched)
            bad_touched = 0
            if label >= 0:
                for s in range(n_states):
                    bad[s] = 1 if species_label[s] != label and species_label[s] != -2 else 0
                    bad_touched += bad[s] * touched[s]
            # -- random matching: by state pairs, or agent by agent when the state pairs
            # to visit outnumber the interactions (a hypergeometric draw costs
            # about as much as agent_factor swaps)
            work = 0
            for r in range(rows.shape[0]):
                if ini[rows[r]] > 0:
                    work += nn_ptr[rows[r] + 1] - nn_ptr[rows[r]] + res_ptr[r + 1] - res_ptr[r]
            if joint:
                groups, bad_seen, broken, applied = _pair_sequence(
                    rng, n_states, ini, rows, resp, w, det, code, out_ptr, out_c, out_d, out_p,
                    label, bad, grp_slot, grp_pq, grp_o, grp_y, c)
            elif ell < agent_factor * work and ell <= _AGENT_PAIRING_MAX:
                if resp.shape[0] < ell:
                    resp = np.empty(max(ell, 2 * resp.shape[0]), dtype=np.int32)
                groups, bad_seen, broken, applied = _pair_agents(
                    rng, n_states, ell, ini, res, rows, w, det, code, out_ptr, out_c, out_d,
                    out_p, label, bad, resp, grp_slot, grp_pq, grp_o, grp_y, c)
            else:
                applied = 0
                groups, bad_seen, broken = _pair_cells(
                    rng, n_states, ell, ini, pool, rows, nn_ptr, nn_q, res_ptr, res_q, w, det,
                    out_ptr, out_p, label, bad, grp_pq, grp_o, grp_y)
            n_a = 0
            n_b = 0
            found_here = False
            batch_events = applied
            if applied > 0:
                for s in range(n_states):
                    touched[s] = c[s] - untouched[s]
            # apply and classify the groups of this batch
            for g in range(groups):
                pq = grp_pq[g]
                p = pq // n_states
                q = pq - p * n_states
                o = grp_o[g]
                y = grp_y[g]
                a = out_c[o]
                b = out_d[o]
                _apply(c, p, q, a, b, y)
                touched[p] -= y
                touched[q] -= y
                touched[a] += y
                touched[b] += y
                batch_events += y
                if label >= 0:
                    bp = bad[p] + bad[q]
                    bn = bad[a] + bad[b]
                    if bp > 0 and bn > 0:
                        broken = True
                        grp_kind[g] = 3
                    elif bp > 0:
                        n_a += y
                        grp_kind[g] = 1
                    elif bn > 0:
                        n_b += y
                        grp_kind[g] = 2
                    else:
                        grp_kind[g] = 0
            events += batch_events
            if label >= 0 and bad_touched > bad_seen:
                broken = True  # a bad agent met a null interaction
            if label >= 0 and not broken and n_a > 0:
                together = True
                for i in range(n_b):  # all n_a fixing pairs come before all n_b breaking ones
                    if rng.random() * (n_a + n_b - i) >= n_b - i:
                        together = False
                        break
                if together:
                    # positions in the run: the changing pairs take a random subset, the
                    # fixing and breaking ones a random part of it; consensus comes with
                    # the last fixing pair, silence (if any) after the last changing one
                    rank = _kth_of_subset(rng, batch_events, n_a + n_b, n_a)
                    top = _kth_of_subset(rng, ell, batch_events, batch_events)
                    pos = top
                    if rank < batch_events:
                        pos = _kth_of_subset(rng, top - 1, batch_events - 1, rank)
                    if discrete:
                        t_top = (s0 + top) / n
                        first_time = (s0 + pos) / n
                    else:
                        t_top = t0 + span
                        if top <= unif:
                            t_top = t0 + span * rng.beta(float(top), float(unif + 1 - top))
                        first_time = t_top
                        if pos < top:
                            first_time = t0 + (t_top - t0) * rng.beta(float(pos),
                                                                      float(top - pos))
                    last_pending = False
                    last_time = t_top
                    found_here = True
                    first = label
                    if stop_at_consensus:
                        # the state after interaction pos: the fixing groups, none of the
                        # breaking ones, and pos - n_a of the other ell - n_a - n_b pairs
                        others = ell - n_a - n_b
                        n_neutral = 0
                        for g in range(groups):
                            pq = grp_pq[g]
                            p = pq // n_states
                            q = pq - p * n_states
                            o = grp_o[g]
                            _apply(c, out_c[o], out_d[o], p, q, grp_y[g])  # undo
                            if grp_kind[g] == 0:
                                neutral[n_neutral] = grp_y[g]
                                n_neutral += 1
                                others -= grp_y[g]
                        neutral[n_neutral] = others
                        multivariate_hypergeometric_draw(rng, neutral[:n_neutral + 1],
                                                         pos - n_a, neutral_pick)
                        events -= batch_events
                        i_neutral = 0
                        for g in range(groups):
                            pq = grp_pq[g]
                            p = pq // n_states
                            q = pq - p * n_states
                            o = grp_o[g]
                            y = 0
                            if grp_kind[g] == 1:
                                y = grp_y[g]
                            elif grp_kind[g] == 0:
                                y = neutral_pick[i_neutral]
                                i_neutral += 1
                            _apply(c, p, q, out_c[o], out_d[o], y)
                            events += y
                        status = 2
                        t = first_time
                        steps = s0 + pos
                        break
            if batch_events > 0 and not found_here:
                last_pending = True
                last_m = batch_events
                last_ell = ell
                last_span = span
                last_unif = unif
                last_t0 = t0
                last_s0 = s0
        if cut:
            if discrete:
                steps = tau_steps
                t = steps / n
            else:
                t = tau
            continue
        if discrete:
            steps += m_int
            t = steps / n
        else:
            t = t0 + span
        if not collide:
            continue
        # ---- the colliding interaction: at least one agent of the run takes part
        run = 2 * ell
        out = n - run
        r = rng.random() * (float(run - 1) + 2.0 * float(out))
        if r < run - 1:
            p = _pick(rng, touched, run)
            touched[p] -= 1
            q = _pick(rng, touched, run - 1)
            touched[p] += 1
        elif r < float(run - 1) + float(out):
            p = _pick(rng, touched, run)
            q = _pick(rng, untouched, out)
        else:
            p = _pick(rng, untouched, out)
            q = _pick(rng, touched, run)
        pq = p * n_states + q
        if w[pq] > 0.0:
            u = rng.random()
            acc = 0.0
            for i in range(out_ptr[pq], out_ptr[pq + 1]):
                acc += out_p[i]
                if u < acc:
                    _apply(c, p, q, out_c[i], out_d[i], 1)
                    events += 1
                    last_pending = False
                    last_time = steps / n if discrete else t
                    break
        if first < 0:
            lab = consensus_index(species_label, c)
            if lab >= 0:
                first = lab
                first_time = steps / n if discrete else t
                if stop_at_consensus:
                    status = 2

    if status == 1:
        if last_pending:
            pos = _kth_of_subset(rng, last_ell, last_m, last_m)
            if discrete:
                last_time = (last_s0 + pos) / n
            elif pos > last_unif:
                last_time = last_t0 + last_span
            else:
                last_time = last_t0 + last_span * rng.beta(float(pos),
                                                           float(last_unif + 1 - pos))
        end_time = last_time
    elif status == 2:
        end_time = first_time
    else:
        end_time = until
    while k < nt:
        counts[k] = c
        k += 1
    last = consensus_index(species_label, c)
    return counts, first, first_time, last, events, end_time, status


# --------------------------------------------------------------------------- driver
_cache: dict[int, tuple] = {}


def _tables(net: Network) -> dict:
    hit = _cache.get(id(net))
    if hit is not None and hit[0] is net:
        return hit[1]
    tables = protocol_tables(net)
    if len(_cache) > 16:
        _cache.clear()
    _cache[id(net)] = (net, tables)
    return tables


def _check_times(until, times):
    until = float(until)
    if math.isnan(until) or until <= 0:
        raise ValueError(f"`until` must be a positive time, got {until}")
    if times is None:
        times = np.linspace(0.0, until, 101) if math.isfinite(until) else np.zeros(0)
    times = np.ascontiguousarray(times, dtype=np.float64).reshape(-1)
    if times.size and ((np.diff(times) < 0).any() or times[0] < 0 or times[-1] > until
                       or not np.isfinite(times).all()):
        raise ValueError("`times` must be finite, non-decreasing and within [0, until]")
    return until, times


def run_batched(net: Network, *, until: float, times=None, rng=None,
                stop_at_consensus: bool = False, clock: str = "continuous",
                batch_threshold: float = DEFAULT_BATCH_THRESHOLD) -> Trajectory:
    """One exact stochastic run of a population protocol, simulated in batches.

    Parameters
    ----------
    net : Network
        A protocol's network (``from_protocol``) or a network whose reactions
        all have two reactants and two products; it is run as the protocol
        :func:`crn.core.translate.network_to_protocol` gives. At most 2**60 agents.
    until : float
        Horizon in network time (parallel time for a protocol's network);
        ``math.inf`` runs until consensus (with ``stop_at_consensus``) or silence.
    times : array_like of float, shape (n_times,), optional
        Sample times in ``[0, until]``, non-decreasing; default 101 evenly
        spaced points (none for an infinite horizon).
    rng : numpy.random.Generator, int, SeedSequence or None
        The generator is passed to the numba kernel, which draws from it
        directly: the same seed gives the same run.
    stop_at_consensus : bool, default False
        Stop at the first consensus (the later samples repeat that state).
    clock : {"continuous", "discrete"}, default "continuous"
        ``"continuous"``: interactions are a Poisson process of rate n per
        unit of parallel time, the clock of the network's Markov chain and of
        the direct method. ``"discrete"``: interaction k happens at parallel
        time k / n.
    batch_threshold : float, default 8
        When a batch would hold fewer non-null interactions than this on
        average, step from one non-null interaction to the next instead.
        ``0`` batches whenever the population allows it (n >= 3). Any value
        gives the same law; it only trades speed.

    Returns
    -------
    Trajectory
        Counts at ``times``, the outcome (first consensus label and time,
        label at the end), non-null interactions, the end time (horizon, time
        of silence or of consensus) and the status.

    Raises
    ------
    ModelError
        If a reaction is not two-in two-out.
    CRNError
        If the population exceeds 2**60.
    ValueError
        For a non-positive ``until``, bad ``times`` or an unknown ``clock``.

    References
    ----------
    Berenbrink, Hammer, Kaaser, Meyer, Penschuck, Tran, "Simulating population
    protocols in sub-constant time per interaction", ESA 2020, LIPIcs 173,
    16:1-16:22 (arXiv:2005.03584).

    Examples
    --------
    >>> from crn.io.models import load_model
    >>> net = load_model("models/approximate_majority.toml", {"n": 10**9, "gap": 0}).network
    >>> run = run_batched(net, until=math.inf, rng=1, stop_at_consensus=True)
    >>> run.status, run.outcome.label in ("X", "Y")
    ('consensus', True)
    """
    if clock not in ("continuous", "discrete"):
        raise ValueError(f"`clock` must be 'continuous' or 'discrete', got {clock!r}")
    if not batch_threshold >= 0:
        raise ValueError(f"`batch_threshold` must be >= 0, got {batch_threshold}")
    until, times = _check_times(until, times)
    n = net.population
    if n > MAX_POPULATION:
        raise CRNError(f"the batched engine handles at most 2**60 agents, got {n}")
    tables = _tables(net)
    scale = tables["time_scale"]
    discrete = clock == "discrete"
    if discrete and math.isfinite(until) and until * scale * max(n, 1) >= 2.0**62:
        raise ValueError("the discrete clock counts interactions in int64: "
                         f"n * until must stay below 2**62, got {n} * {until}")
    rng = np.random.default_rng(rng)
    counts, first, first_time, last, events, end_time, status = _kernel(
        rng, len(net.species), tables["w"], tables["det"], tables["code"], tables["out_ptr"],
        tables["out_c"],
        tables["out_d"], tables["out_p"], tables["nn_ptr"], tables["nn_q"], tables["rows"],
        tables["res_ptr"], tables["res_q"],
        np.ascontiguousarray(net.species_label, dtype=np.int64),
        np.ascontiguousarray(net.initial, dtype=np.int64), times * scale, until * scale,
        bool(stop_at_consensus), discrete, float(batch_threshold), float(_AGENT_FACTOR),
        int(_JOINT_FROM_STATES))
    outcome = RunOutcome.from_indices(net, int(first), float(first_time) / scale, int(last))
    return Trajectory(times=times, counts=counts, outcome=outcome, events=int(events),
                      end_time=float(end_time) / scale, status=_STATUS[status])
