"""The leaderboard page in a real browser: headless Chromium from Debian's packages, driven by
Playwright for Python (no browser download)."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not os.path.exists(CHROMIUM),
                       reason=f"{CHROMIUM} is absent (apt-get install -y chromium)"),
]


def _rows(page, table_id):
    return page.eval_on_selector_all(
        f"#{table_id} tbody tr", "rows => rows.map(r => r.cells[1].textContent.trim())")


def test_page_sorts_and_renders_plots(tmp_path):
    from playwright.sync_api import sync_playwright

    from test_leaderboard import _outputs

    outputs, _ = _outputs()
    page_path = tmp_path / "index.html"
    page_path.write_bytes(outputs["index.html"])
    shot = Path(os.environ.get("FLOWGAUGE_SCREENSHOT", tmp_path / "page.png"))
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            requests = []
            page.on("request", lambda r: requests.append(r.url))
            page.goto(page_path.as_uri())
            table = "table-ieee14-all"
            # as written: ranked order (failure rates 0.1, 0.25, 0.5 from the fixture)
            assert _rows(page, table) == ["dc-opf", "nearest", "linear"]
            page.click(f"#{table} thead th:nth-child(2)")  # Entry: alphabetical
            assert _rows(page, table) == ["dc-opf", "linear", "nearest"]
            rate = f"#{table} thead th:nth-child(3)"
            page.click(rate)  # failure rate, ascending
            assert _rows(page, table) == ["dc-opf", "nearest", "linear"]
            page.click(rate)  # again: descending
            assert _rows(page, table) == ["linear", "nearest", "dc-opf"]
            assert page.get_attribute(rate, "aria-sort") == "descending"
            boxes = page.eval_on_selector_all(
                "figure.plot svg", "svgs => svgs.map(s => s.getBoundingClientRect())"
                ".map(b => [b.width, b.height])")
            assert len(boxes) == 2 and all(w > 100 and h > 100 for w, h in boxes)
            # the plot has drawn marks: bars are path elements inside the SVG
            assert page.eval_on_selector("#bars-ieee14 svg", "s => s.querySelectorAll('path').length") > 10
            page.click("#entry-ieee14-nearest summary")
            assert page.is_visible("#entry-ieee14-nearest table.detail")
            assert "do not certify" in page.inner_text("#caution")
            page.screenshot(path=str(shot), full_page=True)
            # the page fetched nothing but itself
            assert requests == [page_path.as_uri()]
        finally:
            browser.close()
    assert shot.stat().st_size > 10_000
