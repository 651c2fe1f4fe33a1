"""Write the ranking as Markdown, CSV, LaTeX (booktabs) and one self-contained HTML page.

Every output records the hash of each submission, scorecard and split, of the rules file and
the flowgauge version, and ends with a line holding the SHA-256 of all bytes before it.
"""

from __future__ import annotations

import csv
import io
import math
import re
from pathlib import Path

import jinja2
from markupsafe import Markup, escape

from .. import __version__
from .._io import round_sig, sha256_hex
from ..errors import IntegrityError
from ._plots import coverage_svg, curves_svg, split_bars_svg, tradeoff_svg
from ._ranking import RankTable, metric_value
from ._rules import METRICS, Rules
from ._text import NAME_CAP, TEXT_CAP, clean, csv_text, md, md_code, safe_link, tex

__all__ = ["OUTPUTS", "CAUTION", "render_outputs", "seal", "check_seal"]

# output file -> (comment opener, comment closer) of its final content-hash line
OUTPUTS = {
    "ranking.md": ("", ""),
    "ranking.csv": ("# ", ""),
    "ranking.tex": ("% ", ""),
    "index.html": ("<!-- ", " -->"),
}

CAUTION = ("Scores measure agreement with reference optimisation results on model networks. "
           "They do not certify that any dispatch is safe to operate: operation follows the "
           "grid operator's rules, local grid codes and licensed engineering practice.")

_SEAL_RE = re.compile(rb"content-sha256: ([0-9a-f]{64})")


def seal(body: str, name: str) -> bytes:
    """``body`` followed by the line that records its SHA-256."""
    data = body.encode("utf-8")
    opener, closer = OUTPUTS[name]
    return data + f"{opener}content-sha256: {sha256_hex(data)}{closer}\n".encode("utf-8")


def check_seal(data: bytes, name: str) -> str:
    """The content hash a table records for itself, checked against its bytes."""
    head, _, last = data.rstrip(b"\n").rpartition(b"\n")
    match = _SEAL_RE.search(last)
    if match is None:
        raise IntegrityError("does not end with its content-sha256 line", where=name)
    recorded, actual = match.group(1).decode(), sha256_hex(head + b"\n")
    if recorded != actual:
        raise IntegrityError(f"records content hash {recorded}, its content hashes to {actual}",
                             where=name)
    return recorded


def _finalize(value):
    """Every ``{{ ... }}`` output: a string loses its control characters (markup made here,
    such as the plots, passes as it is)."""
    if isinstance(value, str) and not isinstance(value, Markup):
        return clean(value, 10**9)
    return value


def _env(*, html: bool) -> jinja2.Environment:
    """The template environment. The page is HTML-escaped by Jinja2 (``autoescape=True``, set
    explicitly: ``select_autoescape`` goes by the file name and misses ``page.html.j2``); the
    Markdown and LaTeX templates escape each value with the filter of their own syntax."""
    env = jinja2.Environment(
        loader=jinja2.PackageLoader("flowgauge.leaderboard", "templates"),
        autoescape=html, finalize=_finalize, trim_blocks=True, lstrip_blocks=True,
        keep_trailing_newline=True, undefined=jinja2.StrictUndefined)
    env.filters["tex"] = tex
    env.filters["md"] = md
    env.filters["md_code"] = md_code
    env.filters["path_breaks"] = _path_breaks
    env.filters["slug"] = _plain_slug
    return env


def _path_breaks(value) -> Markup:
    """A file path for the page, HTML-escaped, with a line-break opportunity after each ``/``
    (a narrow column then breaks a path between folders, never inside a name)."""
    return Markup("/<wbr>").join(escape(part) for part in clean(value, NAME_CAP).split("/"))


def _fmt(v: float | None, digits: int) -> str:
    """Fixed digits for people; empty when missing; no "-0.000"."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    text = f"{v:.{digits}f}"
    return text[1:] if text.startswith("-") and not text.strip("-0.") else text


def _num(v) -> str:
    """Machine-readable number: 10 significant digits, empty for missing."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return f"{round_sig(float(v)):.10g}"


_DIGITS = {"restoration_failure_rate": 4, "restored_gap_pct_mean": 3,
           "restored_gap_pct_abs_mean": 3, "raw_gap_pct_mean": 3, "solved_share": 4, "severity_mean": 4}


def _ci_text(ci, digits: int) -> str:
    return "" if ci is None else f"[{_fmt(ci[0], digits)}, {_fmt(ci[1], digits)}]"


def _table_view(t: RankTable, rules: Rules, entries: dict, ids: dict, table_id: str) -> dict:
    keys = t.keys or rules.keys
    digits = [_DIGITS[k.metric] for k in keys]
    rows = []
    for s in t.standings:
        cards = [entries[s.entry][sp].card for sp in t.splits]
        rows.append({
            "rank": s.rank, "entry": clean(s.entry), "tied": s.tied, "target": ids[s.entry],
            "cells": [_fmt(v, d) for v, d in zip(s.values, digits)],
            "raw": [_num(v) for v in s.values],
            "per_split_rfr": [_fmt(metric_value(c, "restoration_failure_rate"), 4) for c in cards],
            "ci": _ci_text(s.diff_ci, digits[0]),
            "ci_raw": ("", "") if s.diff_ci is None else tuple(_num(x) for x in s.diff_ci),
        })
    calibration = t.scope == "calibration"
    if calibration:
        for r in rows:
            r.update(rank="–", tied=False, ci="", ci_raw=("", ""))
    return {"network": t.network, "scope": t.scope, "splits": list(t.splits), "rows": rows,
            "unranked": [f"{clean(e)} ({clean(why, 1000)})" for e, why in t.unranked],
            "id": table_id, "calibration": calibration, "key_list": _key_views(keys)}


def _key_views(keys) -> list[dict]:
    return [{"metric": k.metric, "direction": k.direction, "label": METRICS[k.metric].label} for k in keys]


def _context(*, board, rules, records, tables, entries, splits_used, notes, with_plots: bool):
    keys = _key_views(rules.keys)
    split_keys = [{"split": clean(name), "key_list": _key_views(ks)} for name, ks in rules.split_keys]
    names = list(dict.fromkeys(t.network for t in tables))
    net_ids = _unique_slugs(names, "network")
    table_ids = _unique_slugs([(t.network, t.scope) for t in tables], "table")
    entry_ids = _unique_slugs([(n, e) for n in names for e in sorted(entries[n])], "entry")
    networks = []
    for network in names:
        ids = {e: entry_ids[(network, e)] for e in entries[network]}
        net = {"name": clean(network), "id": net_ids[network],
               "tables": [_table_view(t, rules, entries[network], ids,
                                      table_ids[(t.network, t.scope)])
                          for t in tables if t.network == network],
               "details": _details(network, entries[network], rules, records, ids)}
        if with_plots:  # matplotlib's SVG: text escaped by its XML writer, ids prefixed per plot
            overall = next(t for t in tables if t.network == network and t.scope == "all")
            calib_names = {s.entry for t in tables if t.network == network and t.scope == "calibration"
                           for s in t.standings}
            ranked = {e: v for e, v in entries[network].items() if e not in calib_names}
            calib = {e: v for e, v in entries[network].items() if e in calib_names}
            net["tradeoff_svg"] = Markup(tradeoff_svg(
                network, ranked, rules.splits, [s.entry for s in overall.standings],
                id_prefix=f"{net_ids[network]}-tradeoff"))
            net["bars_svg"] = Markup(split_bars_svg(
                network, ranked, rules.splits, id_prefix=f"{net_ids[network]}-bars"))
            for kind in ("solved", "tolerance"):
                svg = curves_svg(network, ranked, calib, rules.splits, kind,
                                 id_prefix=f"{net_ids[network]}-{kind}")
                net[f"{kind}_svg"] = None if svg is None else Markup(svg)
            svg = coverage_svg(network, _coverage_data(network, splits_used),
                               id_prefix=f"{net_ids[network]}-coverage")
            net["coverage_svg"] = None if svg is None else Markup(svg)
        networks.append(net)
    shown = [{**r, "submission": clean(r["submission"]), "entry": clean(r["entry"]),
              "network": clean(r["network"]), "split": clean(r["split"]),
              "scorecard": clean(r["scorecard"])} for r in records]
    return {
        "version": __version__, "rules": rules, "rules_sha256": rules.sha256, "keys": keys,
        "split_keys": split_keys,
        "level_pct": f"{rules.level * 100:g}", "networks": networks, "records": shown,
        "splits_used": splits_used, "notes": [clean(n, 2000) for n in notes],
        "caution": CAUTION,
    }


def _coverage_data(network: str, splits_used: list[dict]) -> list[dict]:
    """Per split of ``network`` that the board uses (in split-name order): distinct regimes
    among the first n samples for every n (from the references' signatures in sample order;
    for a split whose references are withheld, the manifest's discovery curve at its block
    ends), and the share of samples with each limit family binding (the manifest's coverage,
    else computed from the references with the same function)."""
    import numpy as np

    from ..splits import SPLIT_NAMES
    from ..splits._coverage import coverage
    from ..splits._manifest import read_manifest
    from ..splits._store import MANIFEST_FILE, read_table
    order = {name: i for i, name in enumerate(SPLIT_NAMES)}
    used = sorted((s for s in splits_used if s["network"] == network),
                  key=lambda s: (order.get(s["split"], len(order)), s["split"]))
    out = []
    for s in used:
        folder = Path(s["folder"])
        manifest = read_manifest(folder / MANIFEST_FILE)
        cov = manifest.get("coverage")
        ref_path = folder / manifest["files"]["references"]["path"]
        xs, ys = np.zeros(0, int), np.zeros(0, int)
        if ref_path.exists():
            t = read_table(ref_path, columns=["sample_id", "signature", "binding"])
            sid = t.column("sample_id").to_numpy()
            sig = np.asarray(t.column("signature").to_pylist(), dtype=object)[np.argsort(sid, kind="stable")]
            first = np.zeros(sig.size, bool)
            first[np.unique(sig.astype(str), return_index=True)[1]] = True
            xs, ys = np.arange(1, sig.size + 1), np.cumsum(first)
            if cov is None:
                binding = [b for _, b in sorted(zip(sid.tolist(), t.column("binding").to_pylist()))]
                cov = coverage(sig, binding)
        elif cov is not None:
            block, new = int(cov["discovery_block"]), cov["discovery"]
            xs = np.minimum(np.arange(1, len(new) + 1) * block, int(manifest["samples"]))
            ys = np.cumsum(new)
        out.append({"name": s["split"], "samples": xs.tolist(), "regimes": ys.tolist(),
                    "family_shares": None if cov is None else cov["family_shares"]})
    return out


def _details(network: str, entries: dict, rules: Rules, records: list[dict],
             ids: dict) -> list[dict]:
    out = []
    for name in sorted(entries):
        per_split = []
        for split in [s for s in rules.splits if s in entries[name]]:
            sc = entries[name][split]
            a = sc.card["aggregates"]
            rec = next(r for r in records if r["scorecard"] == sc.where)
            per_split.append({
                "split": split, "samples": a.get("samples"),
                "rfr": _fmt(a.get("restoration_failure_rate"), 4),
                "rfr_ci": _ci_text((a.get("ci95") or {}).get("restoration_failure_rate"), 4),
                "restored": {k: _fmt((a.get("restored_gap_pct") or {}).get(k), 3)
                             for k in ("mean", "median", "p95", "max")},
                "restored_ci": _ci_text((a.get("ci95") or {}).get("restored_gap_pct_mean"), 3),
                "raw": {k: _fmt((a.get("raw_gap_pct") or {}).get(k), 3)
                        for k in ("mean", "median", "p95", "max")},
                "causes": [(clean(c), _fmt(v, 4)) for c, v in sorted(
                    (a.get("restoration_failure_causes") or {}).items())],
                "violations": [(clean(f), _fmt(v.get("share"), 4), _fmt(v.get("mean"), 4),
                                _fmt(v.get("max"), 4))
                               for f, v in sorted((a.get("violations") or {}).items())
                               if v is not None],
                "inference_ms": {k: _fmt(v, 3) for k, v in (a.get("inference_ms") or {}).items()},
                "speedup": _fmt(a.get("speedup_indicative"), 1) or None,
                "graded": _graded_view(a),
                "record": {**rec, "scorecard": clean(rec["scorecard"])},
            })
        families = sorted({f for s in per_split for f, *_ in s["violations"]})
        violation_rows = [
            (f, [next((v[1:] for v in s["violations"] if v[0] == f), ("", "", ""))
                 for s in per_split])
            for f in families]
        model = entries[name][next(iter(entries[name]))].card.get("model") or {}
        training_only = all((sc.card.get("model") or {}).get("training_data_only") is True
                            for sc in entries[name].values())
        out.append({"name": clean(name), "id": ids[name], "training_only": training_only,
                    "description": clean(model.get("description"), TEXT_CAP),
                    "authors": _authors(model.get("authors")),
                    "link": safe_link(model.get("link")),
                    "splits": per_split, "violation_rows": violation_rows})
    return out


def _graded_view(a: dict) -> dict | None:
    """Solved share, severity and the tolerance curve of a format-2 scorecard (None for format 1)."""
    if "solved_share" not in a:
        return None
    sev = a.get("severity") or {}
    curve = a.get("tolerance_curve") or {}
    pairs = zip(curve.get("multiples") or [], curve.get("failure_rate") or [])
    return {"solved": _fmt(a.get("solved_share"), 4), "threshold": _fmt(a.get("solved_threshold_pct"), 3),
            "severity": {k: _fmt(sev.get(k), 4) for k in ("mean", "p95", "max")},
            "switched": _fmt((a.get("switched_generators") or {}).get("mean"), 3),
            "curve": ", ".join(f"{_fmt(m, 3)}x {_fmt(f, 4)}" for m, f in pairs)}


def _authors(value) -> str:
    if isinstance(value, list):
        return clean(", ".join(clean(v) for v in value), 1000)
    return clean(value)


def _plain_slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "-", clean(text)).strip("-")


def _unique_slugs(names: list, prefix: str) -> dict:
    """An element id per name (a string, or a tuple of strings joined by ``-``): ``prefix-``
    and the name's letters, digits, ``-`` and ``_``; where two names would share an id (or a
    name has none of those), the first 8 hex digits of the name's SHA-256 follow, so that
    every id on the page is distinct and reproducible."""
    text = {n: "-".join(n) if isinstance(n, tuple) else n for n in names}
    base = {n: "-".join(p for p in (prefix, _plain_slug(text[n])) if p) for n in names}
    counts: dict[str, int] = {}
    for b in base.values():
        counts[b] = counts.get(b, 0) + 1
    digest = lambda n: sha256_hex(text[n].encode("utf-8", "surrogatepass"))[:8]  # noqa: E731
    return {n: b if counts[b] == 1 and b != prefix else f"{b}-{digest(n)}"
            for n, b in base.items()}


def _csv(ctx: dict, tables: tuple[RankTable, ...], entries: dict, records: list[dict]) -> str:
    """Every field is quoted, so that a ``#`` inside a name is not read as the start of a
    comment (pandas ``comment="#"``); text cells are one line and cannot start a formula."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n", quoting=csv.QUOTE_ALL)
    metrics = list(dict.fromkeys([k["metric"] for k in ctx["keys"]]
                                 + [k["metric"] for sk in ctx["split_keys"] for k in sk["key_list"]]))
    w.writerow(["network", "scope", "splits", "rank", "entry", "tied_with_above",
                *metrics, "diff_to_above_ci_low",
                "diff_to_above_ci_high", "submissions", "predictions_sha256",
                "scorecards", "scorecard_sha256", "split_sha256", "rules_sha256",
                "flowgauge_version"])
    by_card = {r["scorecard"]: r for r in records}
    for t in tables:
        for s in t.standings:
            recs = [by_card[entries[t.network][s.entry][sp].where] for sp in t.splits]
            ci = ("", "") if s.diff_ci is None else (_num(s.diff_ci[0]), _num(s.diff_ci[1]))
            by_metric = {k.metric: _num(v) for k, v in zip(t.keys, s.values)}
            calibration = t.scope == "calibration"
            w.writerow([csv_text(t.network), csv_text(t.scope),
                        csv_text(" ".join(t.splits), 1000), "" if calibration else s.rank,
                        csv_text(s.entry), "" if calibration else int(s.tied),
                        *[by_metric.get(m, "") for m in metrics], *(("", "") if calibration else ci),
                        csv_text(" ".join(clean(r["submission"]) for r in recs), 10**6),
                        clean(" ".join(r["predictions_hash"] for r in recs), 10**6),
                        csv_text(" ".join(clean(r["scorecard"]) for r in recs), 10**6),
                        clean(" ".join(r["scorecard_hash"] for r in recs), 10**6),
                        clean(" ".join(r["split_hash"] for r in recs), 10**6),
                        ctx["rules_sha256"], ctx["version"]])
    return buf.getvalue()


def render_outputs(*, board: Path, rules: Rules, records, tables, entries, splits_used,
                   notes) -> dict[str, bytes]:
    """Table file name -> bytes (sealed), in a fixed order; nothing is written here."""
    text_env, html_env = _env(html=False), _env(html=True)
    kw = dict(board=board, rules=rules, records=records, tables=tables, entries=entries,
              splits_used=splits_used, notes=notes)
    ctx = _context(**kw, with_plots=False)
    out = {
        "ranking.md": seal(text_env.get_template("ranking.md.j2").render(ctx), "ranking.md"),
        "ranking.csv": seal(_csv(ctx, tables, entries, records), "ranking.csv"),
        "ranking.tex": seal(text_env.get_template("ranking.tex.j2").render(ctx), "ranking.tex"),
    }
    page_ctx = _context(**kw, with_plots=True)
    out["index.html"] = seal(html_env.get_template("page.html.j2").render(page_ctx), "index.html")
    return out
