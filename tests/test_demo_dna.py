"""The demo's DNA section (crn.demo_dna) on its quick settings."""

import json

import numpy as np
import pytest

from crn.demo import MODEL
from crn.demo_dna import DNA_SETTINGS, dna_section
from crn.io.jsonable import to_jsonable
from crn.io.models import load_model


@pytest.fixture(scope="module")
def section(tmp_path_factory):
    out = tmp_path_factory.mktemp("dna")
    lines = []
    record = dna_section(out, load_model(MODEL).network, n=600, gap=120, rate=1e6,
                         deadline_seconds=7200.0, quick=True, seed=np.random.SeedSequence(3),
                         echo=lines.append)
    return out, record, "\n".join(lines)


def test_dna_section_answers_the_three_questions(section):
    out, record, text = section
    assert "three-domain strand displacement" in text and "model predictions" in text
    assert (out / "dna_implementation.png").read_bytes()[:4] == b"\x89PNG"
    json.dumps(to_jsonable(record))  # summary.json can hold it
    assert record["mean_field"]["label"] == "R"
    # derived (tests/test_implement_wiring.py): 16/9 slower at 1e6 /M/s and q_max 6e6 /M/s
    ratio = record["mean_field"]["time"] / record["mean_field"]["formal_time"]
    assert ratio == pytest.approx(16 / 9, rel=0.03)
    assert record["fuel_needed"]["excess"] is None  # no fuel fixes sequestration
    assert record["fuel_needed"]["slow_excess"] > 2
    tol = record["leak_tolerance"]
    assert tol["leak_per_molar_second"] is not None
    assert tol["failing_per_molar_second"] is None or \
        tol["failing_per_molar_second"] > tol["leak_per_molar_second"]
    rows = record["copies"]["rows"]
    assert [r["leak_per_molar_second"] for r in rows] == [0.0, *DNA_SETTINGS["quick"]["leaks"]]
    assert rows[0]["copies"] is not None and "formal_copies" in rows[0]
    # leak 0 decides like the formal network (Soloveichik, Seelig & Winfree 2010; the
    # deadline of 2 h, 72 parallel time units, is far beyond both decisions): the circuit's
    # range of copies reaches down to the formal answer
    assert rows[0]["copies_low"] <= rows[0]["formal_copies"] <= rows[0]["copies_high"]
    assert rows[0]["verdict"] == "same copies within sampling error"
    assert record["copies"]["risk_floor"] < record["copies"]["risk"]


@pytest.mark.parametrize("name", sorted(DNA_SETTINGS))
def test_run_budgets_can_certify_the_risk(name):
    """A run budget whose floor (crn.analyses.design_questions.risk_floor, derived there
    from the simultaneous Clopper-Pearson bound) is at or above the risk makes every
    copies probe and every leak level fail whatever the circuit does: the full demo once
    reported "no droplet size works" at leak 0 for that reason alone (400 runs, risk 1%)."""
    from crn.analyses.design_questions import risk_floor

    s = DNA_SETTINGS[name]
    for budget in ("copies_runs_max", "tolerance_runs_max"):
        assert risk_floor(s[budget]) < s["risk"]
    assert risk_floor(400) > 0.01  # the old full settings


def test_a_budget_below_the_risk_floor_is_refused(monkeypatch, tmp_path):
    bad = dict(DNA_SETTINGS["quick"], risk=0.01, copies_runs_max=100)
    monkeypatch.setitem(DNA_SETTINGS, "quick", bad)
    with pytest.raises(ValueError, match="copies_runs_max"):
        dna_section(tmp_path, load_model(MODEL).network, n=600, gap=120, rate=1e6,
                    deadline_seconds=7200.0, quick=True, seed=np.random.SeedSequence(3),
                    echo=lambda _: None)
