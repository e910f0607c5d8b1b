"""``crn report``: one self-contained HTML page, its numbers, saved results, and a real browser."""

from __future__ import annotations

import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest
from click.testing import CliRunner

from crn.cli import cli
from crn.commands.options import load
from crn.report import SECTIONS, ReportSettings, collect_report, render_report
from crn.solvers.exact import exact_outcomes

ROOT = Path(__file__).resolve().parent.parent
AM = ROOT / "models" / "approximate_majority.toml"
SMALL = ["n=30", "gap=2"]


class _Page(HTMLParser):
    """The parts of a page the checks look at: section ids, figures, images, tables, links."""

    def __init__(self):
        super().__init__()
        self.sections, self.images, self.scripts, self.external = [], [], 0, []
        self.figures, self.tables = [], []
        self._figure = self._table = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self.sections.append(a.get("id"))
        elif tag == "script":
            self.scripts += 1
        elif tag == "figure":
            self._figure = {"img": None, "caption": False}
        elif tag == "img":
            self.images.append(a)
            if self._figure is not None:
                self._figure["img"] = a
        elif tag == "figcaption" and self._figure is not None:
            self._figure["caption"] = True
        elif tag == "table":
            self._table = {"th": 0, "caption": False}
        elif tag == "th" and self._table is not None:
            self._table["th"] += 1
        elif tag == "caption" and self._table is not None:
            self._table["caption"] = True
        for key in ("src", "href"):
            value = a.get(key) or ""
            if re.match(r"(https?:)?//", value):
                self.external.append(value)

    def handle_endtag(self, tag):
        if tag == "figure":
            self.figures.append(self._figure)
            self._figure = None
        elif tag == "table":
            self.tables.append(self._table)
            self._table = None


@pytest.fixture(scope="module")
def small_report():
    model = load(str(AM), SMALL)
    from crn.analyses.cells import cell_networks

    networks = cell_networks(model)
    settings = ReportSettings(runs=100, seed=11, regime_n=(30, 100),
                              regime_gap_fractions=(0.1, 0.3), regime_runs_max=60, risk=0.05)
    data = collect_report(model, model_text=AM.read_text(), model_file=AM.name, sets=SMALL,
                          networks=networks, settings=settings)
    return data, render_report(data, command_line="crn report ...")


def test_page_is_self_contained_accessible_and_in_order(small_report):
    _, html = small_report
    page = _Page()
    page.feed(html)
    # the sections the report promises, in the promised order
    assert page.sections == [sid for sid, _ in SECTIONS]
    assert page.scripts == 0, "the page must be readable without JavaScript"
    assert page.external == [], "no network access may be needed to open the page"
    assert len(page.figures) == 3  # mean field, ODE vs stochastic, regime map
    for fig in page.figures:
        assert fig["caption"], "every figure has a caption"
        assert fig["img"]["alt"].strip(), "every figure has alternative text"
        assert fig["img"]["src"].startswith("data:image/svg+xml;base64,")
    assert page.tables and all(t["th"] > 0 and t["caption"] for t in page.tables)
    # the wet-lab caution sits in the header
    head = html.split("<nav", 1)[0]
    assert "predictions of a mathematical model" in head


def test_page_numbers_are_the_library_numbers(small_report):
    data, html = small_report
    # exact chain of the same network, computed here independently of the report's call
    exact = exact_outcomes(load(str(AM), SMALL).network)
    for label, p in exact.probabilities.items():
        assert f"<td>{label}</td><td class=\"num\">{p:.6g}</td>" in html
    assert f"{exact.states:,} reachable configurations" in html
    # the outcome table counts every run once, and the label counts are the ensemble's
    counts = data.ensemble.outcomes()
    assert sum(counts.values()) == 100
    for label in ("X", "Y"):
        assert f"<td>{label}</td><td class=\"num\">{counts.get(label, 0)}</td>" in html
    # the model file's hash in the reproduce box is the file's (common practice: SHA-256)
    import hashlib

    assert hashlib.sha256(AM.read_bytes()).hexdigest() in html
    # every regime cell appears with its flag
    assert html.count('<td class="flag-') == len(data.regimes.cells)


def test_reproduce_commands_give_the_report_numbers(small_report):
    """The `crn compare` line in the reproduce box reproduces the report's outcome counts."""
    data, _ = small_report
    line = next(c for c in data.commands if c.startswith("crn compare"))
    args = line.split()[1:]
    args[1] = str(AM)
    args = [a for a in args if a != "--set"]
    sets = [a for a in args if "=" in a]
    rest = [a for a in args if "=" not in a]
    cmd = [*rest[:2], *[x for s in sets for x in ("--set", s)], *rest[2:], "--json"]
    result = CliRunner().invoke(cli, cmd, catch_exceptions=False)
    assert result.exit_code == 0, result.output
    outcomes = json.loads(result.output)["ssa"]["outcomes"]
    expected = data.ensemble.outcomes()
    assert {k: v for k, v in outcomes.items() if v} == {k: v for k, v in expected.items() if v}


def test_from_folder_reuses_the_saved_sweep(tmp_path):
    saved = tmp_path / "saved"
    runner = CliRunner()
    args = ["regimes", str(AM), "--n", "30,60", "--gap-fractions", "0.1,0.4", "--risk", "0.05",
            "--runs-max", "40", "--seed", "5", "--out", str(saved)]
    assert runner.invoke(cli, args, catch_exceptions=False).exit_code == 0
    sweep = json.loads((saved / "regimes.json").read_text())
    out = tmp_path / "r.html"
    result = runner.invoke(cli, ["report", str(AM), "--set", "n=30", "--set", "gap=2",
                                 "--from", str(saved), "--runs", "20", "--seed", "1",
                                 "-o", str(out), "--json"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    obj = json.loads(result.output)
    assert obj["sections"] == [sid for sid, _ in SECTIONS]
    assert Path(obj["path"]) == out.resolve()
    html = out.read_text()
    assert "taken from a saved sweep" in html
    # the saved cells, not the report's default grid (100, 300, 1000)
    assert html.count('<td class="flag-') == len(sweep["cells"])
    for cell in sweep["cells"]:
        assert f'<td class="num">{cell["n"]:,}</td><td class="num">{cell["gap"]:,}</td>' in html


@pytest.mark.parametrize("args, message", [
    (["--from", "no/such/folder"], "--from"),
    (["--deadline", "2h"], "--deadline needs --rate"),
    (["--regime-n", "10,abc"], "--regime-n"),
    (["--rate", "5 furlongs"], "rate"),
])
def test_bad_input_is_one_line_exit_2(tmp_path, capsys, args, message):
    from crn.cli import main

    code = main(["report", str(AM), "-o", str(tmp_path / "r.html"), "--runs", "0",
                 "--regime-n", "", *args])
    assert code == 2
    err = capsys.readouterr().err.strip()
    assert message in err and len(err.splitlines()) == 1
    assert not (tmp_path / "r.html").exists()


def test_bad_saved_file_names_it(tmp_path, capsys):
    from crn.cli import main

    (tmp_path / "regimes.json").write_text("{not json")
    code = main(["report", str(AM), "-o", str(tmp_path / "r.html"), "--from", str(tmp_path)])
    assert code == 2
    err = capsys.readouterr().err.strip()
    assert "regimes.json" in err and len(err.splitlines()) == 1


def _browser():
    try:
        from playwright.sync_api import sync_playwright  # noqa: F401
    except ImportError:
        return None, "the playwright package is not installed (make test installs it)"
    path = shutil.which("chromium") or shutil.which("chromium-browser")
    if path is None:
        return None, "no chromium on PATH (make test installs Debian's chromium package)"
    return path, ""


def test_report_renders_in_a_real_browser(small_report, tmp_path):
    """Open the page in headless Chromium: no console errors, captions, alt text, headers."""
    executable, why = _browser()
    if executable is None:
        pytest.skip(why)
    from playwright.sync_api import sync_playwright

    page_file = tmp_path / "report.html"
    page_file.write_text(small_report[1], encoding="utf-8")
    shot = ROOT / "out" / "report-screenshot.png"
    shot.parent.mkdir(exist_ok=True)
    problems = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=executable, args=[
            "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run"])
        try:
            page = browser.new_page(viewport={"width": 1100, "height": 900})
            page.on("console", lambda m: problems.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: problems.append(str(e)))
            page.on("request", lambda r: problems.append(f"request {r.url}")
                    if not r.url.startswith(("file:", "data:")) else None)
            page.goto(page_file.as_uri())
            figures = page.eval_on_selector_all(
                "figure", "fs => fs.map(f => [f.querySelector('img').alt, "
                          "f.querySelector('img').naturalWidth, "
                          "(f.querySelector('figcaption') || {}).textContent || ''])")
            tables = page.eval_on_selector_all(
                "table", "ts => ts.map(t => t.querySelectorAll('thead th').length)")
            headings = page.eval_on_selector_all("h2", "hs => hs.map(h => h.textContent)")
            page.screenshot(path=str(shot), full_page=True)
        finally:
            browser.close()
    assert problems == []
    assert len(figures) == 3
    for alt, width, caption in figures:
        assert alt.strip() and caption.strip()
        assert width > 0, "every embedded SVG decodes and draws"
    assert tables and all(n > 0 for n in tables)
    assert headings == [heading for _, heading in SECTIONS]
    assert shot.stat().st_size > 10_000


def test_report_shows_the_dna_implementation(tmp_path):
    """With --implement the network section adds the implementation's roles and fuel."""
    from crn.dna import DnaParameters, implement

    out = tmp_path / "dna.html"
    result = CliRunner().invoke(cli, [
        "report", str(AM), "--set", "n=20", "--set", "gap=2", "--runs", "10", "--regime-n", "",
        "--implement", "ssw", "--fuel", "1uM", "--leak", "10/M/s", "--rate", "1e6/M/s",
        "--concentration", "10nM", "--seed", "3", "-o", str(out)], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    html = out.read_text()
    impl = implement(load(str(AM), ["n=20", "gap=2"]).network, "ssw",
                     DnaParameters(rate=1e6, concentration=10e-9, fuel=1e-6, leak=10.0))
    assert "DNA implementation (ssw scheme)" in html
    assert f"{impl.network.n_species} species and {impl.network.n_reactions} reactions" in html
    for species in impl.fuel:
        assert f"<tr><td>{species}</td><td class=\"num\">1 uM</td></tr>" in html
    page = _Page()
    page.feed(html)
    assert all(t["th"] > 0 and t["caption"] for t in page.tables)


def test_report_refuses_a_bad_dna_option(tmp_path, capsys):
    from crn.cli import main

    code = main(["report", str(AM), "--implement", "ssw", "--fuel", "-1uM", "--runs", "0",
                 "--regime-n", "", "-o", str(tmp_path / "r.html")])
    assert code == 2
    err = capsys.readouterr().err.strip()
    assert "--fuel" in err and len(err.splitlines()) == 1
