"""Bounded verification of majority protocols and replay of its counterexamples."""

from collections import Counter
from pathlib import Path

import pytest

from crn.analyses.verify import verify
from crn.core.errors import CRNError
from crn.core.protocol import Outcome, Protocol
from crn.io.models import load_model

MODELS = Path(__file__).resolve().parents[1] / "models"


def load(name, **params):
    return load_model(MODELS / f"{name}.toml", params)


def cases(max_n):
    return sum(n + 1 for n in range(2, max_n + 1))


def test_four_state_exact_majority_is_correct_up_to_12():
    # Mertzios, Nikoletseas, Raptopoulos, Spirakis, ICALP 2014: always correct on any
    # connected interaction graph, so on the complete graph too
    result = verify(load("exact_majority"), 12)
    assert result.correct and result.counterexample is None
    assert result.checked == cases(12)
    # derived: at a tie every strong opinion cancels, leaving weak a and b that
    # never interact, so no stable consensus; these are reported, not failures
    assert [t["n"] for t in result.ties] == [2, 4, 6, 8, 10, 12]
    assert all(t["outcomes"] == ["none"] for t in result.ties)


def _apply(protocol, counts, step):
    p, q = step["pair"]
    assert counts[p] >= 1 + (p == q) and counts[q] >= 1, f"{step} needs agents not present"
    result = tuple(step["outcome"])
    assert result in {(o.initiator, o.responder) for o in protocol.outcomes(p, q)}, step
    counts = Counter(counts)
    counts[p] -= 1
    counts[q] -= 1
    counts[result[0]] += 1
    counts[result[1]] += 1
    return counts


def _successors(protocol, counts):
    for (p, q) in protocol.transitions:
        if counts[p] >= 1 + (p == q) and counts[q] >= 1:
            for o in protocol.outcomes(p, q):
                yield _apply(protocol, counts, {"pair": [p, q],
                                                "outcome": [o.initiator, o.responder]})


def _key(counts):
    return tuple(sorted((s, c) for s, c in counts.items() if c))


def _output(protocol, counts):
    labels = {protocol.output.get(s) for s, c in counts.items() if c}
    return labels.pop() if len(labels) == 1 and None not in labels else "none"


def _reachable(protocol, counts):
    seen, todo = {_key(counts): counts}, [counts]
    while todo:
        for nxt in _successors(protocol, todo.pop()):
            if _key(nxt) not in seen:
                seen[_key(nxt)] = nxt
                todo.append(nxt)
    return seen


def test_cancel_and_spread_is_refuted_and_the_path_replays():
    model = load("cancel_spread")
    result = verify(model, 6)
    assert not result.correct
    cx = result.counterexample
    # derived: n <= 4 cannot fail (3:1 cancels to 2:0), at n = 5 from 2 X and 3 Y the
    # three cancellations that empty Y need a regrown X first: 4 interactions
    assert cx["n"] == 5 and len(cx["path"]) == 4
    assert cx["initial"] == {"X": 2, "Y": 3, "B": 0} and cx["expected"] == "Y"
    protocol = model.protocol
    counts = Counter(cx["initial"])
    for step in cx["path"]:  # replay through the protocol's own transitions
        counts = _apply(protocol, counts, step)
    assert {s: counts[s] for s in cx["final"]} == cx["final"]
    # the end lies in a bottom component (everything reachable leads back) that
    # outputs the wrong label
    reachable = _reachable(protocol, counts)
    for other in reachable.values():
        assert _key(counts) in _reachable(protocol, other)
    outputs = {_output(protocol, c) for c in reachable.values()}
    assert outputs == {cx["label"]} and cx["label"] != cx["expected"]


@pytest.mark.parametrize("name", ["approximate_majority", "voter"])
def test_small_protocols_are_refuted(name):
    # Mertzios et al. 2014 prove that no protocol with fewer than four states computes exact
    # majority on every interaction graph; that bound is over all graphs, so it does not by
    # itself refute these protocols on the complete graph used here. The refutation is the
    # counterexample, derived: with 1 X and 2 Y the lone X can convert both Ys first
    result = verify(load(name), 5)
    cx = result.counterexample
    assert not result.correct and cx["n"] == 3
    assert cx["initial"]["X"] == 1 and cx["label"] == "X" and cx["expected"] == "Y"
    counts = Counter(cx["initial"])
    for step in cx["path"]:
        counts = _apply(load(name).protocol, counts, step)
    assert counts["X"] == 3


def _with_ties(resolve_weak):
    # exact majority with a third weak state T that reports "tie": strong opinions
    # cancel into T, strong opinions convert every weak state of the other kind,
    # and (if resolve_weak) leftover weak opinions collapse into T
    rules = {("A", "B"): ("T", "T"), ("A", "T"): ("A", "a"), ("B", "T"): ("B", "b"),
             ("A", "b"): ("A", "a"), ("B", "a"): ("B", "b")}
    if resolve_weak:
        rules.update({("a", "b"): ("T", "T"), ("a", "T"): ("T", "T"), ("b", "T"): ("T", "T")})
    transitions = {}
    for (p, q), (p2, q2) in rules.items():
        transitions[(p, q)] = (Outcome(p2, q2),)
        transitions[(q, p)] = (Outcome(q2, p2),)
    return Protocol("majority with ties", ("A", "B", "a", "b", "T"), transitions,
                    {"A": 1, "B": 1},
                    {"A": "A", "a": "A", "B": "B", "b": "B", "T": "tie"}, ("A", "B"))


def test_tie_label_is_judged_when_the_model_has_one():
    good = verify(_with_ties(True), 7)
    assert good.correct and good.ties == [] and good.checked == cases(7)
    bad = verify(_with_ties(False), 7)
    assert not bad.correct and bad.counterexample["expected"] == "tie"


def test_progress_and_input_checks():
    seen = []
    verify(load("exact_majority"), 4, progress=lambda done, total: seen.append((done, total)))
    assert seen == [(1, 3), (2, 3), (3, 3)]
    with pytest.raises(CRNError, match="no majority question"):
        verify(load("epidemic"), 4)
    with pytest.raises(ValueError, match="max_n"):
        verify(load("exact_majority"), 1)
