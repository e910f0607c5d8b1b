"""The droplet demo end to end, on its small settings (crn.demo --quick)."""

import json

import pytest
from scipy.stats import skellam

import crn.plots.regimes
from crn.core.units import AVOGADRO, WET_LAB_CAUTION
from crn.demo import REPORT, SETTINGS, run_demo


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    lines, notes = [], []
    original = crn.plots.regimes.plot_feasibility

    def spy(*args, **kwargs):
        notes.append(kwargs.get("note"))
        return original(*args, **kwargs)

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(crn.plots.regimes, "plot_feasibility", spy)
        summary = run_demo(out, quick=True, workers=1, echo=lines.append)
    return out, summary, "\n".join(lines), notes


def test_demo_prints_the_verdict_and_the_caveat(demo):
    _, summary, text, _ = demo
    assert "R + S -> R + B" in text  # the translated network
    assert "== Verdict ==" in text
    assert "Smallest droplet:" in text
    assert WET_LAB_CAUTION in text
    chosen = summary["chosen"]
    assert chosen is not None
    assert f"{chosen['copies']:,} copies per droplet" in text
    assert "(par. time)" in text  # the deadline column says its unit


def test_demo_saves_the_printed_report(demo):
    out, _, text, _ = demo
    assert (out / REPORT).read_text() == text + "\n"


def test_demo_writes_figures_and_tables(demo):
    out, summary, _, _ = demo
    for name in ("ode_vs_stochastic.png", "regime_map.png", "feasibility.png"):
        data = (out / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000
    assert json.loads((out / "summary.json").read_text())["chosen"] == summary["chosen"]
    rows = (out / "feasibility.csv").read_text().splitlines()
    assert len(rows) == 2 + len(SETTINGS["quick"]["concentrations"])


def test_wet_lab_caution_travels_with_every_output(demo):
    # the summary, the CSV (a header comment line) and the figure (a footnote) carry it
    out, _, _, notes = demo
    assert json.loads((out / "summary.json").read_text())["caution"] == WET_LAB_CAUTION
    first = (out / "feasibility.csv").read_text().splitlines()[0]
    assert first == f"# caution: {WET_LAB_CAUTION}"
    assert notes == [WET_LAB_CAUTION]


def test_feasibility_figure_footnote_and_units():
    import matplotlib

    matplotlib.use("Agg")
    rows = [{"concentration_molar": 1e-8, "volume_liters": 5e-13, "copies": 3000},
            {"concentration_molar": 1e-9, "volume_liters": None, "copies": None}]
    ax = crn.plots.regimes.plot_feasibility(rows, note=WET_LAB_CAUTION)
    assert any(WET_LAB_CAUTION[:60] in t.get_text().replace("\n", " ")
               for t in ax.figure.texts)
    assert "(nM)" in ax.get_xlabel() and "(fL)" in ax.get_ylabel()
    # 5e-13 L is 500 fL at 10 nM
    x, y = ax.lines[0].get_data()
    assert (x[0], y[0]) == pytest.approx((10.0, 500.0))


def test_demo_numbers_are_consistent_with_units_and_the_loading(demo):
    _, summary, _, _ = demo
    s = SETTINGS["quick"]
    chosen = summary["chosen"]
    conc, n = chosen["concentration_molar"], chosen["copies"]
    # docs/design.md physical units: V = n / (C N_A); deadline 2 h = 7200 s * k * C parallel time
    assert chosen["volume_liters"] == pytest.approx(n / (conc * AVOGADRO), rel=1e-12)
    assert chosen["deadline_parallel"] == pytest.approx(7200 * 1e6 * conc, rel=1e-12)
    assert chosen["median_hours"] < 2.0
    # the answer is on the safe side: its 95% upper bound on P(wrong) lies below the risk, and
    # the lattice n one step below (step 5 for a 20% gap) was probed and is not surely below it
    assert chosen["loading"] == "poisson" == summary["loading"]
    assert chosen["p_wrong_high"] < s["risk"]
    assert chosen["copies_below"] == n - 5
    # the share of droplets loaded with a reversed or tied gap: Skellam (Skellam 1946)
    lam_a, lam_b = (n + n // 5) / 2, (n - n // 5) / 2
    assert chosen["loading_reversal"] == pytest.approx(skellam.cdf(0, lam_a, lam_b), abs=1e-9)
    # the loading part of the risk is at most the chance of a reversed loading
    assert 0 <= chosen["risk_loading"] <= chosen["loading_reversal"]
    assert 0 <= chosen["risk_kinetics"] <= chosen["p_wrong_high"]
    # too low a concentration gives too short a deadline: no droplet size decides
    slow = [r for r in summary["feasibility"] if r["concentration_molar"] == 1e-9]
    assert slow and slow[0]["copies"] is None


def test_demo_writes_the_report_page(demo):
    """out/report.html carries the demo's answer, its regime map and the wet-lab caution."""
    out, summary, _, _ = demo
    html = (out / "report.html").read_text(encoding="utf-8")
    assert summary["report"] == str(out / "report.html")
    assert f"n = {summary['chosen']['copies']:,}</strong>" in html
    assert "taken from a saved sweep" in html  # the demo's own map, not a second sweep
    assert html.count('<td class="flag-') == len(summary["regimes"]["cells"])
    assert html.count("predictions of a mathematical model") >= 2  # header and the answer
    chosen = summary["chosen"]
    assert f"Probability of a wrong or late decision at this n:\n  {chosen['p_wrong']:.3g}" in html
