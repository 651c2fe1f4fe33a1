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
            assert page.eval_on_selector("#network-ieee14-bars svg", "s => s.querySelectorAll('path').length") > 10
            page.click("#entry-ieee14-nearest summary")
            assert page.is_visible("#entry-ieee14-nearest table.detail")
            assert "do not certify" in page.inner_text("#caution")
            page.screenshot(path=str(shot), full_page=True)
            # the page fetched nothing but itself
            assert requests == [page_path.as_uri()]
        finally:
            browser.close()
    assert shot.stat().st_size > 10_000


def _browser(p):
    return p.chromium.launch(executable_path=CHROMIUM, args=ARGS)


def test_injected_text_never_runs_and_shows_literally(tmp_path):
    from playwright.sync_api import sync_playwright

    from test_board_hardening import HOSTILE_AUTHOR, HOSTILE_FILE, HOSTILE_LINK, hostile_outputs

    name = "<script>window.__pwned=1</script>"
    outputs, _, _ = hostile_outputs([name, "<img src=x onerror=window.__pwned=5>", "plain"],
                                    authors=[HOSTILE_AUTHOR], files=[HOSTILE_FILE] * 3,
                                    link=HOSTILE_LINK,
                                    description="<iframe src=javascript:window.__pwned=6>")
    page_path = tmp_path / "index.html"
    page_path.write_bytes(outputs["index.html"])
    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            dialogs = []
            page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
            page.goto(page_path.as_uri())
            for link in page.query_selector_all("a"):
                if link.is_visible():
                    link.hover()
            page.click("details summary")
            assert page.evaluate("window.__pwned") is None and dialogs == []
            # the text shows literally, as the submitter wrote it (control characters removed)
            cells = _rows(page, "table-ieee14-all")
            assert name in cells and "<img src=x onerror=window.__pwned=5>" in cells
            assert "x</summary><script>window.__pwned=2</script>" in page.inner_text("body")
            assert page.eval_on_selector_all("script", "s => s.length") == 1
        finally:
            browser.close()


def _same_scores_outputs(k):
    import numpy as np

    from flowgauge.leaderboard._render import render_outputs
    from test_leaderboard import RULES, SPLITS, entries_from, parse_rules, rank_table
    # k entries with the same scores: their rings coincide in the trade-off plot
    n = 20
    names = ["baseline dc-opf", "baseline linear", "baseline nearest", "my proxy v2"][:k]
    spec = {nm: {s: (np.r_[np.ones(3), np.zeros(n - 3)], np.full(n, 1.5)) for s in SPLITS}
            for nm in names}
    entries = entries_from(spec)
    rules = parse_rules(RULES)
    records = [{"submission": f"submissions/ieee14/{s}/a-rather-long-folder-name/{nm}.json",
                "network": "ieee14", "split": s, "entry": nm,
                "predictions_hash": entries[nm][s].card["predictions_hash"],
                "scorecard": entries[nm][s].where,
                "scorecard_hash": entries[nm][s].card["scorecard_hash"],
                "split_hash": entries[nm][s].card["split"]["split_hash"]}
               for nm in names for s in SPLITS]
    tables = (rank_table("ieee14", "all", SPLITS, entries, rules),
              *(rank_table("ieee14", s, (s,), entries, rules) for s in SPLITS))
    return render_outputs(board=Path("lb"), rules=rules, records=records, tables=tables,
                          entries={"ieee14": entries}, splits_used=[], notes=[])


_BOXES = """svg => Array.from(svg.querySelectorAll('text')).map(t => {
    const b = t.getBoundingClientRect(); const m = t.getScreenCTM();
    const size = parseFloat(getComputedStyle(t).fontSize) * Math.hypot(m.a, m.b);
    return [t.textContent, b.left, b.top, b.right, b.bottom, size]; })"""


def test_plots_labels_ids_sorting_and_narrow_screens(tmp_path):
    from playwright.sync_api import sync_playwright

    page_path = tmp_path / "index.html"
    page_path.write_bytes(_same_scores_outputs(4)["index.html"])
    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            page.goto(page_path.as_uri())
            boxes = page.eval_on_selector("#network-ieee14-tradeoff svg", _BOXES)
            labels = [b for b in boxes if b[0].startswith(("baseline", "my proxy"))]
            assert len(labels) == 4
            for i, a in enumerate(labels):  # no two entry labels overlap
                for b in labels[i + 1:]:
                    assert a[3] <= b[1] or b[3] <= a[1] or a[4] <= b[2] or b[4] <= a[2], (a, b)
            sizes = [b[5] for svg in ("tradeoff", "bars") for b in
                     page.eval_on_selector(f"#network-ieee14-{svg} svg", _BOXES)]
            assert min(sizes) >= 10.5  # plot text about 11 px or larger
            ids = page.eval_on_selector_all("[id]", "els => els.map(e => e.id)")
            assert len(ids) == len(set(ids))
            # an entry link opens its details
            page.click("#table-ieee14-all tbody tr:first-child a")
            target = page.get_attribute("#table-ieee14-all tbody tr:first-child a", "href")[1:]
            assert page.eval_on_selector(f"#{target}", "d => d.open")
            # sorting by another column hides the differences to the entry above
            diff = "#table-ieee14-all td.diff"
            assert page.is_visible(diff)
            page.click("#table-ieee14-all thead th:nth-child(2)")
            page.click("#table-ieee14-all thead th:nth-child(2)")  # descending: not ranked order
            assert not page.is_visible(diff)
            page.click("#table-ieee14-all thead th:nth-child(1)")  # back to the ranked order
            assert page.is_visible(diff)
            # on a narrow screen: paths in the hashes table break only between folders, and
            # the page does not scroll sideways (wide tables scroll inside their own box)
            page.set_viewport_size({"width": 420, "height": 900})
            broken = page.evaluate("""() => {
                // a line ends only after "/", "-" or a space, never between two letters
                const out = [];
                document.querySelectorAll('#hash-table code').forEach(code => {
                  const walker = document.createTreeWalker(code, NodeFilter.SHOW_TEXT);
                  let prev = null, prevTop = null;
                  while (walker.nextNode()) {
                    const node = walker.currentNode;
                    for (let i = 0; i < node.length; i++) {
                      const r = document.createRange(); r.setStart(node, i); r.setEnd(node, i + 1);
                      const rect = r.getClientRects()[0];
                      if (!rect) continue;
                      if (prevTop !== null && rect.top > prevTop + 1 && !"/- ".includes(prev)
                          && node.data[i] !== " ") {
                        out.push(code.textContent);
                      }
                      prev = node.data[i]; prevTop = rect.top;
                    }
                  }
                });
                return out; }""")
            assert broken == []
            assert page.evaluate("document.documentElement.scrollWidth") <= 420
        finally:
            browser.close()
