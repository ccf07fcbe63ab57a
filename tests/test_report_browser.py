"""The report in a real browser: headless Chromium, loaded from a file URL, network off.

Fails on any console error, uncaught exception or failed request, and on any
request other than the page itself; checks that the screenshot is not blank;
sorts the results table by clicking a column header (and by the keyboard),
filters it, and lays the page out for print on A4.

Chromium is Debian's ``chromium`` package (``apt-get install -y chromium``;
``.ci/run`` installs it). Without it the tests skip, saying how to install it,
unless ``SIMWAVE_REQUIRE_BROWSER=1`` (set by ``.ci/run``), where they fail.
"""

from __future__ import annotations

import io
import json
import os
import pathlib

import pytest
from chromium import Chromium, find_chromium
from report_cases import make_batch

from simwave.report import write_report

CHROMIUM = find_chromium()
if CHROMIUM is None and os.environ.get("SIMWAVE_REQUIRE_BROWSER") == "1":
    raise RuntimeError("SIMWAVE_REQUIRE_BROWSER=1 but no Chromium found: apt-get install -y "
                       "chromium (or set SIMWAVE_CHROMIUM to its path)")
pytestmark = pytest.mark.skipif(
    CHROMIUM is None,
    reason="no Chromium on this machine: install Debian's package (apt-get install -y "
           "chromium) or set SIMWAVE_CHROMIUM; .ci/run installs it")

#: A4 minus the print margins of the page's @page rule (12 mm each side), in CSS pixels
#: (96 px per inch, 25.4 mm per inch: CSS Values and Units Level 3, sec. 5.2).
A4_CONTENT_PX = (210 - 2 * 12) / 25.4 * 96


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    folder = tmp_path_factory.mktemp("browser")
    result = make_batch(str(folder))
    path = write_report(result)
    with open(result.summary_json, encoding="utf-8") as fh:
        summary = json.load(fh)
    with Chromium(CHROMIUM) as browser:
        browser.open(pathlib.Path(path).as_uri())
        yield browser, path, summary


def column_keys(browser, column: str) -> list:
    """The sort keys of a column, top to bottom, as the page shows the rows now."""
    return browser.evaluate(
        "(function(){var t=document.getElementById('rows-table');"
        "var heads=[].slice.call(t.tHead.rows[0].cells).map(function(h){return h.dataset.col});"
        f"var i=heads.indexOf({json.dumps(column)});"
        "return [].slice.call(t.tBodies[0].rows).map(function(r){var c=r.cells[i];"
        "var s=c.getAttribute('data-s');if(s!==null){return s===''?null:Number(s);}"
        "var v=JSON.parse(c.getAttribute('data-v')||'null');"
        "return typeof v==='number'?v:null;});})()")


def test_loads_without_errors_or_requests(page):
    browser, path, _ = page
    assert browser.console_errors() == []
    assert browser.failed_requests() == []
    # the page itself and nothing else (data: URLs are in the page, not fetched)
    assert [u for u in browser.requests() if not u.startswith("data:")] == [
        pathlib.Path(path).as_uri()]
    assert browser.evaluate("document.documentElement.classList.contains('js')") is True


def test_screenshot_is_not_blank(page):
    from PIL import Image

    browser, _, _ = page
    browser.evaluate("window.scrollTo(0, 0)")
    import numpy as np

    img = Image.open(io.BytesIO(browser.screenshot())).convert("RGB")
    assert img.size == (1280, 900)
    pixels = np.asarray(img).reshape(-1, 3)
    not_white = np.count_nonzero(pixels.min(axis=1) < 200)
    assert not_white > 0.02 * len(pixels)  # text and rules, not an empty page
    assert len(np.unique(pixels, axis=0)) > 50  # anti-aliased text in several colours


def test_click_on_a_column_header_sorts_the_rows(page):
    browser, _, summary = page
    col = "overshoot_pct_worst"
    before = column_keys(browser, col)
    assert before == [r[col] for r in summary["rows"]]  # summary order until sorted
    browser.click(f'#rows-table th[data-col="{col}"] button')
    keys = column_keys(browser, col)
    numbers = [k for k in keys if k is not None]
    assert numbers == sorted(numbers) and len(numbers) == 2
    assert keys[: len(numbers)] == numbers  # missing values last
    assert browser.evaluate(
        f"document.querySelector('#rows-table th[data-col=\"{col}\"]')"
        ".getAttribute('aria-sort')") == "ascending"
    browser.click(f'#rows-table th[data-col="{col}"] button')
    keys = column_keys(browser, col)
    numbers = [k for k in keys if k is not None]
    assert numbers == sorted(numbers, reverse=True) and keys[: len(numbers)] == numbers
    assert browser.console_errors() == []


def test_sort_by_keyboard_and_filter(page):
    browser, _, summary = page
    browser.press_enter_on('#rows-table th[data-col="system"] button')
    systems = browser.evaluate(
        "[].slice.call(document.querySelectorAll('#rows-table tbody tr')).map("
        "function(r){return r.cells[1].textContent.trim()})")
    assert systems == sorted(r["system"] for r in summary["rows"])
    shown = browser.evaluate(
        "(function(){var f=document.getElementById('rows-verdict');f.value='run failed';"
        "f.dispatchEvent(new Event('change'));return [].slice.call(document.querySelectorAll("
        "'#rows-table tbody tr')).filter(function(r){return !r.hidden}).length;})()")
    assert shown == sum(1 for r in summary["rows"] if r["status"] == "failed")
    assert browser.evaluate("document.getElementById('rows-count').textContent").startswith(
        f"{shown} of {len(summary['rows'])}")
    assert browser.console_errors() == []


def test_print_layout_fits_a4(page):
    browser, _, _ = page
    browser.call("Emulation.setEmulatedMedia", media="print")
    try:
        browser.call("Emulation.setDeviceMetricsOverride", width=int(A4_CONTENT_PX), height=1000,
                     deviceScaleFactor=1, mobile=False)
        widths = browser.evaluate(
            "[document.documentElement.scrollWidth,"
            " document.getElementById('rows-table').getBoundingClientRect().width,"
            " getComputedStyle(document.querySelector('nav')).display]")
        pdf = browser.print_pdf()
    finally:
        browser.call("Emulation.setEmulatedMedia", media="")
        browser.call("Emulation.setDeviceMetricsOverride", width=1280, height=900,
                     deviceScaleFactor=1, mobile=False)
    assert widths[0] <= int(A4_CONTENT_PX) + 1, widths  # nothing runs off the paper
    assert widths[1] <= A4_CONTENT_PX
    assert widths[2] == "none"
    assert pdf.startswith(b"%PDF") and pdf.count(b"/Type /Page") >= 2
