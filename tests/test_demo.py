"""The droplet demo end to end, on its small settings (crn.demo --quick)."""

import json

import pytest

from crn.demo import SETTINGS, run_demo
from crn.exact import transient_outcomes
from crn.io.models import load_model
from crn.probes import InitialSplit
from crn.units import AVOGADRO


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    lines = []
    summary = run_demo(out, quick=True, workers=1, echo=lines.append)
    return out, summary, "\n".join(lines)


def test_demo_prints_the_verdict_and_the_caveat(demo):
    _, summary, text = demo
    assert "R + S -> R + B" in text  # the translated network
    assert "== Verdict ==" in text
    assert "Smallest droplet:" in text
    assert "model predictions" in text and "safety practice" in text
    chosen = summary["chosen"]
    assert chosen is not None
    assert f"{chosen['copies']:,} copies per droplet" in text


def test_demo_writes_figures_and_tables(demo):
    out, summary, _ = demo
    for name in ("ode_vs_stochastic.png", "regime_map.png", "feasibility.png"):
        data = (out / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000
    assert json.loads((out / "summary.json").read_text())["chosen"] == summary["chosen"]
    rows = (out / "feasibility.csv").read_text().splitlines()
    assert len(rows) == 1 + len(SETTINGS["quick"]["concentrations"])


def test_demo_numbers_are_consistent_with_units_and_exact_analysis(demo):
    _, summary, _ = demo
    s = SETTINGS["quick"]
    chosen = summary["chosen"]
    conc, n = chosen["concentration_molar"], chosen["copies"]
    # DESIGN.md physical units: V = n / (C N_A); deadline 2 h = 7200 s * k * C parallel time
    assert chosen["volume_liters"] == pytest.approx(n / (conc * AVOGADRO), rel=1e-12)
    assert chosen["deadline_parallel"] == pytest.approx(7200 * 1e6 * conc, rel=1e-12)
    assert chosen["median_hours"] < 2.0
    # the copy number is the first lattice n (step 5 for a 20% gap) deciding correctly by the
    # deadline with probability >= 1 - risk; reference: exact transient analysis
    # (Munsky-Khammash finite state projection, exact as the whole space fits)
    nets = InitialSplit(load_model("models/droplet_assay.toml").network)
    target = 1 - s["risk"]
    deadline = chosen["deadline_parallel"]
    assert transient_outcomes(nets(n, n // 5), deadline)["R"] >= target
    assert transient_outcomes(nets(n - 5, (n - 5) // 5), deadline)["R"] < target
    # too low a concentration gives too short a deadline: no droplet size decides
    slow = [r for r in summary["feasibility"] if r["concentration_molar"] == 1e-9]
    assert slow and slow[0]["copies"] is None


def test_demo_writes_the_report_page(demo):
    """out/report.html carries the demo's answer, its regime map and the wet-lab caution."""
    out, summary, _ = demo
    html = (out / "report.html").read_text(encoding="utf-8")
    assert summary["report"] == str(out / "report.html")
    assert f"n = {summary['chosen']['copies']:,}</strong>" in html
    assert "taken from a saved sweep" in html  # the demo's own map, not a second sweep
    assert html.count('<td class="flag-') == len(summary["regimes"]["cells"])
    assert html.count("predictions of a mathematical model") >= 2  # header and the answer
