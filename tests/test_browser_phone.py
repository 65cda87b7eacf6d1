"""The overview on a 390 px phone and a 1280 px desktop, in the system Chromium.

Phone: the tank table turns into labelled cards that fit the screen (no sideways scrolling),
every tank value is on screen, and the charts' text is drawn at 10 px or more. Both widths:
no chart text (title, ticks, legend) lies outside the drawing, i.e. none is cut. Saves a
screenshot of each width in pytest's tmp dir. Skips like tests/test_browser.py without a
Chromium (fails in CI).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from tests.test_browser import CHROMIUM_ARGS, _chromium, _fill, _missing, served_app

__all__ = ["served_app"]  # the fixture, used by name below

MIN_CHART_TEXT_PX = 10.0

TEXT_BOXES = """() => {
  const svg = document.documentElement.getBoundingClientRect();
  return [...document.querySelectorAll('text')].map(t => {
    const r = t.getBoundingClientRect();
    return {text: t.textContent, left: r.left - svg.left, right: r.right - svg.left,
            top: r.top - svg.top, bottom: r.bottom - svg.top,
            width: svg.width, height: svg.height};
  });
}"""


@pytest.mark.parametrize("width", [390, 1280])
def test_overview_fits_the_screen_and_charts_are_legible(served_app, tmp_path: Path, width):
    executable = _chromium()
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:  # pragma: no cover - the dev extra installs it
        _missing("the playwright package is not installed (pip install -e '.[dev]')")
    base, admin_key, viewer_key = served_app
    ids = _fill(base, admin_key)

    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=executable, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": width, "height": 900})
            page.goto(f"{base}/sign-in")
            page.fill("#key", viewer_key)
            page.click("button[type=submit]")
            page.wait_for_url(f"{base}/sites/{ids['site']}")
            page.wait_for_load_state("networkidle")
            page.screenshot(path=str(tmp_path / f"overview-{width}.png"), full_page=True)

            # Nothing wider than the screen: no sideways hunting for a column.
            assert page.evaluate("document.documentElement.scrollWidth") <= width
            table = page.locator("#tank-table")
            assert page.evaluate(
                "t => t.scrollWidth <= t.parentElement.clientWidth + 1", table.element_handle())
            row = page.locator(f"tr[data-tank-id='{ids['tank']}']")
            cells = row.locator("td")
            assert cells.count() == 8
            for index in range(cells.count()):
                box = cells.nth(index).bounding_box()
                assert box["x"] >= 0 and box["x"] + box["width"] <= width + 0.5, index
            label = page.evaluate(
                "td => getComputedStyle(td, '::before').content",
                row.locator("td.floor").element_handle())
            if width == 390:
                assert label == '"Floor"'  # each value carries its column's name
            else:
                assert label in ("none", "normal")  # the ordinary table with its header

            # Chart text: drawn at MIN_CHART_TEXT_PX or more at the width the page gives it.
            image = page.locator("img.chart").first
            shown_width = image.bounding_box()["width"]
            chart_url = base + image.get_attribute("src")
            svg = page.context.request.get(chart_url).text()
            view_width = float(re.search(r'viewBox="0 0 ([\d.]+) ', svg).group(1))
            smallest = min(float(s) for s in re.findall(r"font-size: ([\d.]+)px", svg))
            assert smallest * shown_width / view_width >= MIN_CHART_TEXT_PX, (
                smallest, shown_width, view_width)

            # No chart text outside the drawing (a cut title or legend).
            page.goto(chart_url)
            boxes = page.evaluate(TEXT_BOXES)
            assert any("omega aragonite" in b["text"] or "aragonite" in b["text"]
                       for b in boxes)
            for b in boxes:
                assert b["left"] >= -0.5 and b["right"] <= b["width"] + 0.5, b
                assert b["top"] >= -0.5 and b["bottom"] <= b["height"] + 0.5, b
        finally:
            browser.close()
    assert (tmp_path / f"overview-{width}.png").stat().st_size > 10_000
