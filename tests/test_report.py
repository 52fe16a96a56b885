"""The HTML report: valid, self-contained, escaped, honest about a failed gate; and the
check/compare/report/demo commands."""

import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from bayes_rr.cli import app
from bayes_rr.inference.sampling import SamplerSettings
from bayes_rr.io.fit_folder import write_fit
from bayes_rr.priors.spec import load_spec
from bayes_rr.study.data import study_from_cells
from bayes_rr.workflow.fit import fit_study
from bayes_rr.workflow.steps import report_fit

runner = CliRunner()
VOID = {"meta", "img", "br", "hr", "link", "input", "col", "area", "base", "source", "wbr"}
EVIL = ["<script>alert(1)</script>", 'A & "B"', "C"]


class TagChecker(HTMLParser):
    """Collects tags, attributes and unbalanced closings."""

    def __init__(self):
        super().__init__()
        self.stack, self.errors, self.tags, self.urls = [], [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.urls += [v for k, v in attrs if k in ("src", "href") and v]
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unexpected </{tag}> (open: {self.stack[-3:]})")
        else:
            self.stack.pop()


def parse(html: str) -> TagChecker:
    checker = TagChecker()
    checker.feed(html)
    checker.close()
    return checker


def assert_valid_self_contained(html: str) -> TagChecker:
    assert html.startswith("<!DOCTYPE html>")
    checker = parse(html)
    assert checker.errors == [] and checker.stack == [], (checker.errors, checker.stack)
    assert "script" not in checker.tags and "link" not in checker.tags
    assert all(url.startswith("data:image/svg+xml;base64,") for url in checker.urls)
    assert not re.search(r"https?://", html)
    return checker


@pytest.fixture(scope="module")
def evil_dir(tmp_path_factory):
    rng = np.random.default_rng(5)
    n = np.full((12, 3), 3)
    s = rng.binomial(3, np.linspace(0.05, 0.95, 12)[:, None] * np.ones((1, 3)))
    study = study_from_cells([f"<b>P{i}</b>" for i in range(12)], EVIL, n, s,
                             source='evil "study" <x>.csv')  # fmt: skip
    spec = load_spec("crossed-logit")
    result = fit_study(study, spec, SamplerSettings.from_spec(spec, draws=800, tune=800, seed=2))
    return write_fit(result, tmp_path_factory.mktemp("evil") / "fit")


@pytest.fixture(scope="module")
def report_html(fit_dirs):
    path = report_fit(fit_dirs["crossed-logit"], title="Title <i>x</i> & co", site="Line 4",
                      notes='ran by "QA" <team>')  # fmt: skip
    return path.read_text(encoding="utf-8")


def test_report_is_valid_self_contained_html(report_html):
    checker = assert_valid_self_contained(report_html)
    assert checker.tags.count("img") >= 5  # grid, ranks, densities, per part, checks


def test_report_sections_and_cautions(report_html):
    for heading in ("The answer in brief", "Cautions", "The study", "Results",
                    "Classical statistics", "Does the model fit the data?",
                    "How much the prior matters", "Appendix A. Convergence",
                    "Appendix B. The model as fitted", "Appendix D. Glossary",
                    "Provenance"):  # fmt: skip
        assert f"<h2>{heading}</h2>" in report_html
    assert "posterior predictive check" in report_html
    assert "do not replace the organisation&#x27;s quality procedures" in report_html
    assert "defer to local codes and licensed practice" in report_html
    assert "chosen on purpose" in report_html
    assert "Prior predictive check" in report_html


def test_user_strings_are_escaped(report_html, evil_dir):
    assert "Title &lt;i&gt;x&lt;/i&gt; &amp; co" in report_html
    assert "ran by &quot;QA&quot; &lt;team&gt;" in report_html
    html = report_fit(evil_dir).read_text(encoding="utf-8")
    assert_valid_self_contained(html)
    assert "<script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "A &amp; &quot;B&quot;" in html
    assert "<b>P" not in html
    assert "evil &quot;study&quot; &lt;x&gt;.csv" in html


def test_failed_gate_report_says_so_first_and_hides_results(tmp_path, small_sim):
    spec = load_spec("beta-binomial")
    starved = fit_study(small_sim.study, spec,
                        SamplerSettings.from_spec(spec, draws=20, tune=10, chains=2))  # fmt: skip
    assert not starved.diagnostics.ok
    folder = write_fit(starved, tmp_path / "starved")
    html = report_fit(folder).read_text(encoding="utf-8")
    assert_valid_self_contained(html)
    body = html.split("<body>", 1)[1]
    assert body.startswith("<p class='banner'>NOT CONVERGED")
    assert "<h2>Results</h2>" not in html
    assert "<th>study&#x27;s appraisers</th>" not in html  # the results table header
    assert "Two repeat calls" not in html


def test_machine_readable_twins(fit_dirs, report_html):
    folder = fit_dirs["crossed-logit"]
    checks = json.loads((folder / "checks.json").read_text())
    assert checks["posterior_predictive"]["method"] == "posterior predictive check"
    assert checks["prior_predictive"]
    summary = json.loads((folder / "summary.json").read_text())
    for sentence in summary["readings"]:
        assert sentence.split(" (")[0].replace("'", "&#x27;") in report_html


def test_check_compare_report_commands(fit_dirs, tmp_path):
    folder = str(fit_dirs["crossed-logit"])
    result = runner.invoke(app, ["check", folder, "--draws", "200"])
    assert result.exit_code == 0, result.output
    assert "Posterior predictive check" in result.output
    # every statistic is said in words, whole (wrapped between words at 80 columns)
    checks = json.loads((fit_dirs["crossed-logit"] / "checks.json").read_text())
    text = " ".join(result.output.replace("│", " ").split())
    for stat in checks["posterior_predictive"]["statistics"]:
        assert stat["description"] in text or all(
            word in text for word in stat["description"].split()
        ), stat["description"]
    result = runner.invoke(
        app, ["compare", folder, str(fit_dirs["beta-binomial"]), "--out", str(tmp_path / "c.json")]
    )
    assert result.exit_code == 0, result.output
    assert "PSIS-LOO" in result.output
    assert json.loads((tmp_path / "c.json").read_text())["models"]
    result = runner.invoke(app, ["report", folder, "--out", str(tmp_path / "r.html")])
    assert result.exit_code == 0 and (tmp_path / "r.html").exists()
    bad = runner.invoke(app, ["report", str(tmp_path)])
    assert bad.exit_code == 2 and "summary.json" in bad.stderr


def test_tampered_folder_is_refused(fit_dirs, tmp_path):
    copy = tmp_path / "copy"
    shutil.copytree(fit_dirs["beta-binomial"], copy)
    import pandas as pd

    calls = pd.read_csv(copy / "calls.csv", dtype=str)
    calls.loc[0, "call"] = "1" if calls.loc[0, "call"] == "0" else "0"
    calls.to_csv(copy / "calls.csv", index=False)
    result = runner.invoke(app, ["check", str(copy)])
    assert result.exit_code == 2 and "does not match the data hash" in result.stderr


# ---------------------------------------------------------------------------
# a real browser

CHROMIUM_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--enable-logging=stderr", "--v=0",
]  # fmt: skip


def _chromium() -> str:
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if found is None:
        if os.environ.get("CI"):
            pytest.fail("CI must install Debian's chromium for the browser test (.ci/run)")
        pytest.skip("chromium is not installed (apt-get install chromium)")
    return found


def _run_chromium(args, tmp_path: Path) -> subprocess.CompletedProcess:
    profile = tmp_path / f"profile{len(list(tmp_path.iterdir()))}"
    return subprocess.run(
        [_chromium(), *CHROMIUM_FLAGS, f"--user-data-dir={profile}", *args],
        capture_output=True, text=True, timeout=120, check=False,
    )  # fmt: skip


def _console_errors(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if "CONSOLE" in line]


@pytest.mark.browser
def test_console_error_detection_can_fail(tmp_path):
    # The console check below must be able to see an error: a page that logs one.
    page = tmp_path / "bad.html"
    page.write_text("<!DOCTYPE html><html><body><script>console.error('boom');"
                    "undefined_function();</script></body></html>")  # fmt: skip
    proc = _run_chromium(["--dump-dom", page.as_uri()], tmp_path)
    assert _console_errors(proc.stderr), proc.stderr[-2000:]


@pytest.mark.browser
def test_report_in_headless_chromium(report_html, fit_dirs, tmp_path):
    from matplotlib.image import imread

    page = fit_dirs["crossed-logit"] / "report.html"
    proc = _run_chromium(["--dump-dom", page.as_uri()], tmp_path)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert _console_errors(proc.stderr) == []
    assert "The answer in brief" in proc.stdout
    shot = tmp_path / "shot.png"
    proc = _run_chromium([f"--screenshot={shot}", "--window-size=1200,1600", page.as_uri()],
                         tmp_path)  # fmt: skip
    assert shot.exists(), proc.stderr[-2000:]
    pixels = imread(shot)
    assert pixels.std() > 0.05  # not blank
    pdf = tmp_path / "report.pdf"
    proc = _run_chromium([f"--print-to-pdf={pdf}", "--no-pdf-header-footer", page.as_uri()],
                         tmp_path)  # fmt: skip
    assert pdf.exists(), proc.stderr[-2000:]
    pages = len(re.findall(rb"/Type\s*/Page[^s]", pdf.read_bytes()))
    assert pages > 1
    # the report proper (before the appendices) prints on at most 8 A4 pages
    html_text = page.read_text(encoding="utf-8")
    cut = html_text.index('<section class="appendix-start">')
    main = tmp_path / "main.html"
    main.write_text(html_text[:cut] + "</body></html>\n", encoding="utf-8")
    pdf_main = tmp_path / "main.pdf"
    _run_chromium([f"--print-to-pdf={pdf_main}", "--no-pdf-header-footer", main.as_uri()], tmp_path)
    main_pages = len(re.findall(rb"/Type\s*/Page[^s]", pdf_main.read_bytes()))
    assert 1 < main_pages <= 8, main_pages


def test_nothing_overflows_a_printed_page_width(report_html, fit_dirs, tmp_path):
    """Measured in the page: with the window as wide as an A4 page's printable width
    (186 mm, 703 CSS px), no element's right edge passes the window's."""
    page = (fit_dirs["crossed-logit"] / "report.html").read_text(encoding="utf-8")
    probe = (
        "<script>window.addEventListener('load', () => {"
        "const width = document.documentElement.clientWidth; const wide = [];"
        "for (const el of document.body.querySelectorAll('*')) {"
        "  const box = el.getBoundingClientRect();"
        "  if (box.right > width + 1) wide.push(el.tagName + ':' + Math.round(box.right)); }"
        "document.body.setAttribute('data-overflow', wide.length ? wide.slice(0, 5).join(' ')"
        " : 'none'); });</script>"
    )
    probed = tmp_path / "probed.html"
    probed.write_text(page.replace("</body>", probe + "</body>"), encoding="utf-8")
    proc = _run_chromium(["--window-size=703,1000", "--virtual-time-budget=3000", "--dump-dom",
                          probed.as_uri()], tmp_path)  # fmt: skip
    found = re.search(r'data-overflow="([^"]*)"', proc.stdout)
    assert found is not None, proc.stdout[-500:]
    assert found.group(1) == "none"


def test_a_dollar_in_a_name_is_not_drawn_as_mathematics():
    # Reference: matplotlib's own mathtext; "$\alpha$" drawn as mathematics is one
    # glyph, drawn literally it is eight characters, so its box is far wider.
    import numpy as np

    from bayes_rr.report.plots import call_grid, literal_text

    def label_width() -> float:
        fig = call_grid(["P1"], [r"$\alpha$"], np.array([[2]]), np.array([[1]]))
        fig.canvas.draw()
        label = fig.axes[0].get_xticklabels()[0]
        return label.get_window_extent().width

    as_math = label_width()
    with literal_text():
        literal = label_width()
    assert literal > 3 * as_math


def test_check_prints_the_prior_predictive_check_and_report_compares_models(fit_dirs, tmp_path):
    folder = str(fit_dirs["crossed-logit"])
    result = runner.invoke(app, ["check", folder, "--draws", "200"])
    assert result.exit_code == 0, result.output
    assert "Prior predictive check" in result.output
    checks = json.loads((fit_dirs["crossed-logit"] / "checks.json").read_text())
    assert {"call_rate", "reproducibility_share"} <= {r["key"] for r in checks["prior_predictive"]}
    out = tmp_path / "compared.html"
    result = runner.invoke(app, ["report", folder, "--out", str(out), "--compare",
                                 str(fit_dirs["beta-binomial"])])  # fmt: skip
    assert result.exit_code == 0, result.output
    page = out.read_text()
    assert "Models compared" in page
    assert "crossed-logit" in page and "beta-binomial" in page and "stacking weight" in page


def test_report_includes_a_calibration_run_as_evidence(fit_dirs, tmp_path):
    """A calibration folder's results (here from ranks drawn uniform, summarised by the
    calibration module itself) appear in the report with its design; a folder without
    calibration.json is refused in one line."""
    from bayes_rr.simulation.calibrate import summarise, verdict

    rng = np.random.default_rng(3)
    results = [
        {"quantities": {"sigma_part": {"rank": float(rng.random()), "in_50": True, "in_90": True}}}
        for _ in range(30)
    ]
    rows = summarise(results)
    calibration = tmp_path / "calib"
    calibration.mkdir()
    document = {
        "generator": "bayes-rr test",
        "spec_name": "crossed-logit",
        "seed": 1,
        "design": {"parts": 20, "appraisers": 3, "trials": 2, "part_mix": None},
        "sims": 30,
        "parameters": rows,
        "verdict": verdict(rows, 30),
        "method": "SBC",
    }
    (calibration / "calibration.json").write_text(json.dumps(document))
    out = tmp_path / "r.html"
    result = runner.invoke(
        app,
        [
            "report",
            str(fit_dirs["crossed-logit"]),
            "--out",
            str(out),
            "--calibration",
            str(calibration),
        ],
    )
    assert result.exit_code == 0, result.output
    html = out.read_text()
    assert "Are the intervals calibrated?" in html and "sigma_part" in html
    assert "20 parts x 3 appraisers x 2 trials" in html
    bad = runner.invoke(
        app,
        [
            "report",
            str(fit_dirs["crossed-logit"]),
            "--out",
            str(tmp_path / "s.html"),
            "--calibration",
            str(tmp_path),
        ],
    )
    assert bad.exit_code == 2 and "calibration.json" in bad.stderr
    assert not (tmp_path / "s.html").exists()
