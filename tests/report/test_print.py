"""The report as a person sees it: rendered in a real headless Chromium at screen size, printed to PDF
at A4 and at Letter, and written as PDF by WeasyPrint; each checked mechanically from the browser's
layout and from the PDF (poppler's tools)."""

from __future__ import annotations

import base64

import pytest
from printcheck import PAPER_MM, PT_PER_MM, headings_apart, page_info, page_lines, words_beyond
from storefill import fill

from benchlog.views.report import ReportInfo, SignOff, evaluate, render_report, write_report
from tests.conftest import need_tool

MAX_PAGES = 9  # the demo lots (8 units each): 8 pages on A4, 9 on Letter; 10 on Letter before print styles

# Every element's right edge, in CSS px, beyond the document's width; and every element that draws
# a scroll box (overflow auto/scroll with more content than room).
_LAYOUT_JS = """
const width = document.documentElement.clientWidth;
const wide = [], scrolls = [];
for (const el of document.body.querySelectorAll('*')) {
  const r = el.getBoundingClientRect();
  if (r.width && r.right > width + 0.5) wide.push(el.tagName + ' ' + Math.round(r.right) + ' > ' + width);
  const s = getComputedStyle(el);
  if ((/(auto|scroll)/.test(s.overflowX) && el.scrollWidth > el.clientWidth + 1) ||
      (/(auto|scroll)/.test(s.overflowY) && el.scrollHeight > el.clientHeight + 1)) scrolls.push(el.tagName);
}
return {wide, scrolls, docWidth: document.documentElement.scrollWidth, width};
"""


@pytest.fixture(scope="module")
def evaluation(tmp_path_factory):
    path = tmp_path_factory.mktemp("print") / "lab.sqlite"
    fill(path, units_per_lot=8, recorded=300, seed=1)
    return evaluate(str(path), "AG-MS5:L1", "VS-505:L1", resamples=300, with_runs=True)


def _info(paper: str) -> ReportInfo:
    return ReportInfo(
        number="QR-2026-031",
        revision="B",
        conditions={"ambient": "23 C"},
        sign_off=(SignOff("prepared", "J. Okafor", "2026-12-02"), SignOff("reviewed"), SignOff("approved")),
        paper=paper,
    )


def _page(ev, paper: str) -> str:
    return render_report(
        ev.qualification,
        ev.incumbent,
        ev.candidate,
        spec_name=ev.spec_name,
        spec_text=ev.spec_text,
        spec=ev.spec,
        store=ev.store,
        info=_info(paper),
    )


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    chromium = need_tool("chromium", "chromium")
    driver_path = need_tool("chromedriver", "chromium-driver")
    need_tool("pdftotext", "poppler-utils")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = chromium
    for arg in (
        "--headless=new",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        "--window-size=1280,900",
        f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}",
    ):
        opts.add_argument(arg)
    driver = webdriver.Chrome(options=opts, service=Service(driver_path))
    try:
        yield driver
    finally:
        driver.quit()  # ends the browser and stops chromedriver, on every path


def test_screen_has_no_overflow_and_every_requirement_is_inside_its_plot(evaluation, browser, tmp_path):
    page = tmp_path / "r.html"
    page.write_text(_page(evaluation, ""), encoding="utf-8")
    browser.get(page.as_uri())
    layout = browser.execute_script(_LAYOUT_JS)
    assert layout["wide"] == [] and layout["docWidth"] <= layout["width"]
    assert layout["scrolls"] == []
    plots = browser.execute_script(
        "return [...document.images].map(i => [i.alt, i.dataset.xRange, i.dataset.requirement || null,"
        " i.naturalWidth, i.getBoundingClientRect().width])"
    )
    required = [p for p in plots if p[2] is not None]
    assert any(alt == "Weibull probability plot" for alt, *_ in required)
    assert len(required) >= 4  # the Weibull plot and each distribution with a limit
    for alt, x_range, req, natural, shown in plots:
        assert natural > 0 and shown <= layout["width"], alt  # decoded and not wider than the page
        if req is not None:
            lo, hi = map(float, x_range.split())
            assert lo < float(req) < hi, f"{alt}: requirement {req} outside the axis {x_range}"


@pytest.mark.parametrize("paper", ["a4", "letter"])
def test_prints_cleanly(evaluation, browser, tmp_path, paper):
    from selenium.webdriver.common.print_page_options import PrintOptions

    html = _page(evaluation, paper)
    page = tmp_path / f"r-{paper}.html"
    page.write_text(html, encoding="utf-8")
    browser.get(page.as_uri())
    w_mm, h_mm = PAPER_MM[paper]
    # the print layout at the page's text width (the report's @page margins are 13 mm each side)
    text_px = round((w_mm - 26) / 25.4 * 96)
    browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
    browser.execute_cdp_cmd(
        "Emulation.setDeviceMetricsOverride",
        {"width": text_px, "height": 1000, "deviceScaleFactor": 1, "mobile": False},
    )
    try:
        layout = browser.execute_script(_LAYOUT_JS)
    finally:
        browser.execute_cdp_cmd("Emulation.clearDeviceMetricsOverride", {})
        browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": ""})
    assert layout["wide"] == [] and layout["scrolls"] == []

    opts = PrintOptions()
    opts.page_width, opts.page_height = w_mm / 10, h_mm / 10  # centimetres
    opts.margin_top = opts.margin_bottom = opts.margin_left = opts.margin_right = 0  # the page's own
    opts.shrink_to_fit = False  # shrinking would hide a table wider than the page
    opts.background = True
    pdf = tmp_path / f"r-{paper}.pdf"
    pdf.write_bytes(base64.b64decode(browser.print_page(opts)))
    _check_pdf(pdf, html, paper)


def _check_pdf(pdf, html: str, paper: str) -> None:
    pages, w_pt, h_pt = page_info(pdf)
    w_mm, h_mm = PAPER_MM[paper]
    assert (w_pt, h_pt) == pytest.approx((w_mm * PT_PER_MM, h_mm * PT_PER_MM), abs=1.5)
    assert 2 <= pages <= MAX_PAGES
    assert words_beyond(pdf, w_pt - 10 * PT_PER_MM) == []  # nothing in the right margin or off the page
    assert headings_apart(pdf, html) == []
    text = "\n".join(ln for p in page_lines(pdf) for ln in p)
    assert f"page {pages} of {pages}" in text  # page numbers in the footer
    assert text.count("report QR-2026-031, revision B") == pages  # the running header on every page


def test_pdf_is_written_without_a_browser(evaluation, tmp_path):
    need_tool("pdftotext", "poppler-utils")
    out = tmp_path / "r.pdf"
    write_report(str(out), evaluation, _info(""))  # PDF by the extension, A4 when no paper is given
    assert out.read_bytes()[:5] == b"%PDF-"
    _check_pdf(out, _page(evaluation, "a4"), "a4")
