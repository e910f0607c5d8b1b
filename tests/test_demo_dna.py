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
