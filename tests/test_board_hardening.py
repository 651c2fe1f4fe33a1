"""Text from submitters reaching the board: model names, authors, links and file names with
markup, control characters and random Unicode never run, never break a table and never reach
the terminal raw.

Outside readers check each output: Python's html.parser (the page), pandas (the CSV), a count
of unescaped pipes per row (Markdown tables, as GitHub-flavoured Markdown splits cells), the
LaTeX special characters listed in the LaTeX manual (comments end at a newline), and rich's own
markup rules (the console)."""

from __future__ import annotations

import io
import re
import unicodedata
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from rich.console import Console

from flowgauge._cli.rank import print_report
from flowgauge.leaderboard import BoardReport, parse_rules, rank_table
from flowgauge.leaderboard._render import render_outputs
from test_leaderboard import RULES, SPLITS, card, entries_from

HOSTILE_NAME = '<script>window.__pwned=1</script>\x1b]0;title\x07\x1b[2J|`x`\n\\textbf{bold} #2'
HOSTILE_AUTHOR = 'x</summary><script>window.__pwned=2</script>\x00'
HOSTILE_FILE = 'submissions/ieee14/test-id/<img src=x onerror="window.__pwned=3">`\n\\textbf{f}.json'
HOSTILE_LINK = 'https://x.example/"onmouseover="window.__pwned=4'
CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")


def hostile_outputs(names, *, authors=None, files=None, link="https://example.org/model",
                    description="test entry"):
    """The four outputs for entries called ``names`` (same scores apart from the failure
    count, so that the order is known), with the given authors, link and submission paths."""
    n = 20
    spec = {name: {s: (np.r_[np.ones(i + 1), np.zeros(n - i - 1)], np.full(n, 1.0 + i))
                   for s in SPLITS} for i, name in enumerate(names)}
    entries = entries_from(spec)
    for i, name in enumerate(names):
        for s in SPLITS:
            entries[name][s].card["model"].update(
                authors=[(authors or ["lab"])[i % len(authors or ["lab"])]], link=link,
                description=description)
    rules = parse_rules(RULES)
    records = []
    for i, name in enumerate(names):
        for s in SPLITS:
            sc = entries[name][s]
            path = (files[i] if files else f"submissions/ieee14/{s}/{i}.json") + f"#{s}"
            records.append({"submission": path, "network": "ieee14", "split": s, "entry": name,
                            "predictions_hash": sc.card["predictions_hash"],
                            "scorecard": sc.where, "scorecard_hash": sc.card["scorecard_hash"],
                            "split_hash": sc.card["split"]["split_hash"]})
    tables = (rank_table("ieee14", "all", SPLITS, entries, rules),
              *(rank_table("ieee14", s, (s,), entries, rules) for s in SPLITS))
    notes = [f"{r['submission']}: a note quoting a file name" for r in records[:2]]
    outputs = render_outputs(board=Path("lb"), rules=rules, records=records, tables=tables,
                             entries={"ieee14": entries}, splits_used=[], notes=notes)
    report = BoardReport(Path("lb"), rules, tuple(records), tables,
                         {k: "ab" * 32 for k in outputs}, tuple(r["scorecard"] for r in records),
                         tuple(notes), False)
    return outputs, report, tables


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.attrs, self.ids, self.text = [], [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += [(tag, k, v) for k, v in attrs]
        self.ids += [v for k, v in attrs if k == "id"]

    def handle_data(self, data):
        self.text.append(data)


def check_page(html: str) -> _Page:
    assert not CONTROL.search(html)
    page = _Page()
    page.feed(html)
    assert page.tags.count("script") == 1  # the page's own sorting script, nothing injected
    assert "img" not in page.tags
    assert not [a for a in page.attrs if a[1].startswith("on")]  # no event handler attribute
    for tag, key, value in page.attrs:
        if key == "href":
            assert value.startswith("#") or re.fullmatch(r"https?://[^\s\"'<>\\`]+", value)
    return page


def _unescaped_pipes(line: str) -> int:
    return len(re.findall(r"(?<!\\)\|", line))


def check_markdown(md: str, tables) -> None:
    assert not CONTROL.search(md)
    lines = md.splitlines()
    for t in tables:  # each table: its header, the delimiter row and one row per standing
        head = next(i for i, l in enumerate(lines) if l.startswith("| Rank | Entry |")
                    and i > 0 and lines[i - 2].endswith(t.scope if t.scope != "all" else ")"))
        rows = []
        for line in lines[head + 2:]:
            if not line.startswith("|"):
                break
            rows.append(line)
        assert len(rows) == len(t.standings)
        assert {_unescaped_pipes(r) for r in rows} == {_unescaped_pipes(lines[head])}
    hash_rows = [l for l in lines if l.startswith("| ") and "ieee14" in l and "`" in l]
    assert {_unescaped_pipes(r) for r in hash_rows} == {8}


_TEX_ESCAPES = re.compile(r"\\(textbackslash|textasciitilde|textasciicircum|textbar|textless|"
                          r"textgreater|textquotedbl)\{\}|\\[&%$#_{}]")


def check_latex(tex: str, n_records: int, n_entries: int) -> None:
    assert not CONTROL.search(tex)
    lines = tex.splitlines()
    preamble = lines[:lines.index(r"\begin{table}[t]")]
    # 3 comment lines of the header, one per record; a newline inside a comment would add a
    # line of live TeX here
    assert [l for l in preamble if l.strip()] == [l for l in preamble if l.startswith("% ")]
    assert len([l for l in preamble if l.startswith("% ")]) == 3 + n_records
    rows = [l for l in lines if re.match(r"\s+\d+ & ", l)]
    assert len(rows) == n_entries
    records = [l for l in preamble if l.startswith("% ")][3:]
    for line in rows + records:
        live = _TEX_ESCAPES.sub("", line.split(" & ", 2)[1] if " & " in line else line[2:])
        assert not re.search(r"[\\&%$#_{}~^]", live), line


def check_csv(data: bytes, tables, names) -> None:
    assert not CONTROL.search(data.decode())
    df = pd.read_csv(io.BytesIO(data), comment="#", dtype=str, keep_default_na=False)
    assert len(df) == sum(len(t.standings) for t in tables)
    for col in ("network", "scope", "entry", "submissions", "scorecards"):
        assert not df[col].str.match(r"[=+\-@]").any()
    plain = {n for n in names if n.isprintable() and not n.startswith(("=", "+", "-", "@"))
             and len(n) <= 200}
    overall = df[df.scope == "all"].entry.tolist()
    expected = [s.entry for s in tables[0].standings]
    for got, name in zip(overall, expected):
        if name in plain:  # a round trip, byte for byte
            assert got == name


def check_console(report) -> str:
    buf = io.StringIO()
    print_report(report, Path("lb"), Console(file=buf, width=80, highlight=False))
    out = buf.getvalue()
    assert "\x1b" not in out and not CONTROL.search(out.replace("\n", ""))
    assert max(len(l) for l in out.splitlines()) <= 80
    assert not re.search(r"[0-9a-f]{13,}", out)  # hashes cut to 12 digits on screen
    return out


def test_hostile_text_is_inert_in_every_output():
    names = [HOSTILE_NAME, "=HYPERLINK(\"http://x\")", "model #2", "plain"]
    outputs, report, tables = hostile_outputs(
        names, authors=[HOSTILE_AUTHOR], files=[HOSTILE_FILE, "a|b", "c", "-d"], link=HOSTILE_LINK)
    html = outputs["index.html"].decode()
    page = check_page(html)
    assert 'href="https://x.example/' not in html  # the link with a quote is not linked
    text = "".join(page.text)
    assert "<script>window.__pwned=1</script>" in text  # shown literally, as text
    check_markdown(outputs["ranking.md"].decode(), tables)
    check_latex(outputs["ranking.tex"].decode(), len(report.records), len(names))
    check_csv(outputs["ranking.csv"], tables, names)
    df = pd.read_csv(io.BytesIO(outputs["ranking.csv"]), comment="#")
    assert "model #2" in df.entry.tolist()  # not cut at "#" (read as docs/ranking.md says)
    assert "'=HYPERLINK(\"http://x\")" in df.entry.tolist()  # a formula start is defused
    md = outputs["ranking.md"].decode()
    assert "\\<script\\>" in md and "`<img" not in md  # no live HTML, no code span broken open
    out = check_console(report)
    assert "[/bold]" not in out and "\\textbf{bold} #2" in out.replace("\n", "")


def test_page_ids_are_unique_and_svg_ids_prefixed():
    outputs, _, _ = hostile_outputs(["a b", "a-b", "\u00e9\u00e9", "\u00e8\u00e8"])
    page = check_page(outputs["index.html"].decode())
    assert len(page.ids) == len(set(page.ids))  # matplotlib numbers ids from 1 in each SVG
    assert any(i.startswith("network-ieee14-tradeoff-") for i in page.ids)
    html = outputs["index.html"].decode()
    for ref in re.findall(r'(?:href="#|url\(#)([^")]+)', html):
        assert ref in page.ids  # every reference still points at an element of its own plot


def test_link_is_percent_encoded_or_dropped():
    from flowgauge.leaderboard._text import safe_link
    assert safe_link("https://x.example/a?b=1&c=\u00e9") == "https://x.example/a?b=1&c=%C3%A9"
    for bad in (HOSTILE_LINK, "javascript:alert(1)", "https://x/ y", "https://x/<a>",
                "https://x/\\a", "https://x/\x00", "http://x/`y`", "https://x/'y'"):
        assert safe_link(bad) == ""


_SETTINGS = settings(max_examples=20, deadline=None, derandomize=True,
                     suppress_health_check=[HealthCheck.too_slow])
_TEXT = st.text(st.characters(codec="utf-8", exclude_categories=["Cs"]) | st.sampled_from(
    list("\x00\x07\x1b\x85\x9b\n\r\t\u2028\u202e|`#%&$\\{}_~^<>\"'=+-@[]*")), min_size=1,
    max_size=30)


@_SETTINGS
@given(names=st.lists(_TEXT, min_size=2, max_size=3, unique_by=lambda s: re.sub(
    r"[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u200e\u200f\u2066-\u2069]", "", s)),
       author=_TEXT, files=st.lists(_TEXT, min_size=3, max_size=3))
def test_random_text_keeps_every_output_well_formed(names, author, files):
    from hypothesis import assume
    cleaned = [re.sub(r"\s", " ", "".join(c for c in n if unicodedata.category(c) != "Cc"))
               for n in names]
    assume(len(set(cleaned)) == len(cleaned))
    outputs, report, tables = hostile_outputs(names, authors=[author], files=files)
    check_page(outputs["index.html"].decode())
    check_markdown(outputs["ranking.md"].decode(), tables)
    check_latex(outputs["ranking.tex"].decode(), len(report.records), len(names))
    check_csv(outputs["ranking.csv"], tables, names)
    check_console(report)
