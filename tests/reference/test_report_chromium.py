"""The HTML QC report opened in a real headless browser.

A small synthetic cohort (our generator: 6 subjects, 2,000 vertices per
hemisphere, planted defects) goes through `horosphere run`, which writes
group/desc-cohort_report.html; `horosphere stats` adds a left-hemisphere
group model, and `horosphere report` writes a second report with the
statistics maps. Both are opened in Debian's chromium (/usr/bin/chromium,
installed by scripts/test.sh) driven by Playwright for Python (PyPI; no
browser download): no console or page errors, every <img> decodes
(complete, naturalWidth > 0, HTMLImageElement.decode() resolves), the QC
table has one row per line of the QC CSV (failed units included, same
units in the same order), and a screenshot is kept under
$HOROSPHERE_ARTIFACTS. Without chromium the test skips, unless CI is set
(then it fails). The binary comes from HOROSPHERE_BIN.
"""

import csv
import os
import pathlib
import subprocess

import pytest

REPO = pathlib.Path(__file__).resolve().parents[2]
BIN = os.path.abspath(os.environ.get("HOROSPHERE_BIN", str(REPO / "target" / "debug" / "horosphere")))
CHROMIUM = "/usr/bin/chromium"


def need_chromium():
    if os.path.exists(CHROMIUM):
        return
    if os.environ.get("CI"):
        pytest.fail(f"{CHROMIUM} is missing and CI is set; scripts/test.sh installs it (apt-get install -y chromium)")
    pytest.skip(f"{CHROMIUM} is not installed (set CI to make this a failure)")


def artifacts(tmp_path):
    d = os.environ.get("HOROSPHERE_ARTIFACTS")
    out = pathlib.Path(d) if d else tmp_path / "artifacts"
    out.mkdir(parents=True, exist_ok=True)
    return out


@pytest.fixture(scope="module")
def cohort(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    study = tmp / "study"
    subprocess.run(
        [BIN, "demo", "--out", str(study), "--subjects", "6", "--vertices", "2000", "--seed", "7"],
        check=True,
        capture_output=True,
    )
    manifest = tmp / "cohort.toml"
    manifest.write_text(
        f"""[study]
root = "{study}"
output = "{tmp / 'out'}"
[inputs]
surface = "white"
maps = ["thickness", "depth", "regions"]
landmarks = "landmarks"
template = "{REPO / 'pipelines'}/demo-template-{{hemi}}.toml"
[repair]
max_handle_mm = 1.0   # leave the planted handle uncut, so the report shows a failed unit
[map]
pole = "repair-added"
[resample]
target = "icosphere:3"
"""
    )
    run = subprocess.run([BIN, "run", str(manifest), "--jobs", "2", "--json"], capture_output=True, text=True)
    assert run.returncode in (0, 1), run.stderr
    out = tmp / "out"
    assert (out / "group" / "desc-cohort_report.html").is_file(), run.stderr
    stats = subprocess.run(
        [BIN, "stats", "--matrix", str(out / "group" / "space-icosphere3_desc-thickness_matrix.func.gii"),
         "--participants", str(study / "participants.tsv"), "--formula", "thickness ~ group",
         "--contrast", "group[T.patient]", "--hemi", "L", "-o", str(tmp / "stats")],
        capture_output=True, text=True,
    )
    assert stats.returncode == 0, stats.stderr
    report = tmp / "with-stats.html"
    rep = subprocess.run(
        [BIN, "report", str(out), "-o", str(report), "--study", str(study), "--stats", str(tmp / "stats"), "--json"],
        capture_output=True, text=True,
    )
    assert rep.returncode == 0, rep.stderr
    return out, report


def qc_units(out):
    with open(out / "group" / "desc-cohort_qc.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    return [f"{r['subject']}_hemi-{r['hemi']}" for r in rows], rows


def open_in_chromium(path, shot):
    from playwright.sync_api import sync_playwright

    problems = []
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
        page = browser.new_page(viewport={"width": 1300, "height": 900})
        page.on("console", lambda m: problems.append(f"console {m.type}: {m.text}") if m.type == "error" else None)
        page.on("pageerror", lambda e: problems.append(f"page error: {e}"))
        page.on("requestfailed", lambda r: problems.append(f"request failed: {r.url}"))
        page.goto(path.as_uri(), wait_until="load")
        images = page.evaluate(
            """async () => Promise.all(Array.from(document.images).map(async (i) => {
                let decoded = true;
                try { await i.decode(); } catch (e) { decoded = false; }
                return {complete: i.complete, w: i.naturalWidth, h: i.naturalHeight, decoded: decoded,
                        alt: i.alt, data: i.src.startsWith('data:image/png;base64,')};
            }))"""
        )
        rows = page.evaluate(
            "() => Array.from(document.querySelectorAll('#qc-table tbody tr')).map(r => r.dataset.unit)"
        )
        text = page.inner_text("body")
        stats_cards = page.evaluate("() => document.querySelectorAll('.card.stats').length")
        page.screenshot(path=str(shot), full_page=True)
        browser.close()
    return problems, images, rows, text, stats_cards


@pytest.mark.parametrize("which", ["run", "with-stats"])
def test_report_opens_cleanly_in_chromium(cohort, which, tmp_path):
    need_chromium()
    out, with_stats = cohort
    path = out / "group" / "desc-cohort_report.html" if which == "run" else with_stats
    shot = artifacts(tmp_path) / f"report-{which}.png"
    problems, images, rows, text, stats_cards = open_in_chromium(path, shot)
    assert problems == []
    units, qc = qc_units(out)
    assert len(units) == 12
    # One row per unit, in QC-table order, failed ones included.
    assert rows == units
    failed = [r for r in qc if r["status"] == "failed"]
    assert len(failed) >= 1, "max_handle_mm = 1 leaves the planted handle uncut, so that unit fails"
    # Every image is an inline PNG that decodes to a non-empty picture.
    assert len(images) >= 2 * (len(units) - len(failed))
    for im in images:
        assert im["data"] and im["complete"] and im["decoded"], im["alt"]
        assert im["w"] > 0 and im["h"] > 0, im["alt"]
    assert "not a medical device" in text
    assert "trained analyst" in text
    assert "data-protection" in text
    if which == "with-stats":
        assert stats_cards >= 1
        assert "thickness ~ group" in text
    else:
        assert stats_cards == 0
    assert shot.stat().st_size > 10_000
