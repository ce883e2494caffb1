"""The report page as a person sees it: opened in a real headless Chromium.

Skipped, with the reason, where no Chromium or no playwright package is found
(CI installs Debian's chromium package: see .ci/run).
"""

import json
import shutil

import pytest

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.fixture(scope="module")
def browser():
    executable = _chromium()
    if executable is None:
        pytest.skip("no Chromium found on PATH (Debian: apt-get install chromium); the report page is not "
                    "checked in a browser here")
    sync_api = pytest.importorskip("playwright.sync_api", reason="the playwright package is not installed "
                                   "(pip install landflow[test]); the report page is not checked in a browser")
    with sync_api.sync_playwright() as p:
        # playwright starts Chromium with a fresh, empty profile folder of its own
        browser = p.chromium.launch(executable_path=executable, headless=True, args=CHROMIUM_FLAGS)
        yield browser
        browser.close()


def _open(browser, page_path, width=1100, height=900):
    page = browser.new_page(viewport={"width": width, "height": height})
    problems = []
    page.on("console", lambda message: problems.append(message.text) if message.type == "error" else None)
    page.on("pageerror", lambda error: problems.append(str(error)))
    requests = []
    page.on("request", lambda request: requests.append(request.url))
    page.goto(page_path.resolve().as_uri(), wait_until="load")
    return page, problems, requests


def test_report_page_loads_cleanly_and_sorts(report_run, browser, tmp_path):
    manifest, folder = report_run
    page, problems, requests = _open(browser, folder / "report.html")
    page.screenshot(path=str(tmp_path / "report_top.png"))          # the top of the page, for a person to look at
    assert (tmp_path / "report_top.png").stat().st_size > 10_000
    assert problems == []                                             # no console errors, no script errors
    # nothing fetched but the page itself: every picture is embedded
    assert [u for u in requests if not u.startswith(("file:", "data:"))] == []

    images = page.eval_on_selector_all("img", "els => els.map(e => [e.complete, e.naturalWidth, e.naturalHeight,"
                                              " e.getBoundingClientRect().width])")
    pngs = [o for o in manifest["outputs"] if o["file"].endswith(".png")]
    assert len(images) == len(pngs) + 1 >= 9                          # every map of the run, and the headline map
    assert all(done and w > 0 and h > 0 and shown > 0 for done, w, h, shown in images)
    charts = page.eval_on_selector_all("svg.chart", "els => els.map(e => e.getBoundingClientRect().width)")
    assert len(charts) >= 5 and all(w > 0 for w in charts)           # matrix, scatter, bars, arrival, simulation, timeline
    hover = page.eval_on_selector_all("svg.chart title", "els => els.map(e => e.textContent)")
    assert any(t.startswith("patches 1–2") for t in hover)            # the scatter names its pairs

    def column(key):
        index = page.eval_on_selector_all("#pair-table th", f"els => els.findIndex(e => e.dataset.key == '{key}')")
        return page.eval_on_selector_all(
            "#pair-table tbody tr", f"rows => rows.map(r => parseFloat(r.cells[{index}].dataset.value))")

    before = column("resistance")
    assert before != sorted(before)                                   # not already in that order
    page.click("#pair-table th[data-key=resistance]")
    assert column("resistance") == sorted(before)
    page.click("#pair-table th[data-key=resistance]")
    assert column("resistance") == sorted(before, reverse=True)
    assert problems == []


def test_report_page_fits_a_phone(report_run, browser):
    _, folder = report_run
    page, problems, _ = _open(browser, folder / "report.html", width=390, height=800)
    # nothing but the scrolling table boxes is wider than the screen
    overflow = page.evaluate("document.documentElement.scrollWidth")
    assert overflow <= 390
    assert problems == []


def test_report_page_prints_on_a4(report_run, browser):
    import re
    _, folder = report_run
    page, problems, _ = _open(browser, folder / "report.html")
    pdf = page.pdf(prefer_css_page_size=True, print_background=True)
    sizes = {tuple(round(float(v)) for v in box.split()[2:4])
             for box in re.findall(rb"/MediaBox\s*\[([^\]]*)\]", pdf) for box in [box.decode()]}
    assert sizes == {(595, 842)}                                      # A4 in points, every page
    assert len(re.findall(rb"/Type\s*/Page[^s]", pdf)) >= 3
    assert problems == []
