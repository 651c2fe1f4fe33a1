"""Ranking rules, statistical ties, competition ranks and the table writers.

Expected values are hand calculations written out beside each check, common practice (said
so), or SciPy's bootstrap run on the same data.
"""

from __future__ import annotations

import csv
import io
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from flowgauge.errors import InputError, IntegrityError
from flowgauge.leaderboard import (CAUTION, METRICS, Scored, check_seal, competition_ranks,
                                   paired_bootstrap_interval, parse_rules, rank_table)
from flowgauge.leaderboard._render import render_outputs

RULES = b"""
format = "flowgauge-rules"
format_version = 1

[scope]
networks = "all"
splits = ["test-id", "test-ood", "test-edge"]

[[keys]]
metric = "restoration_failure_rate"
direction = "lower"

[[keys]]
metric = "restored_gap_pct_abs_mean"
direction = "lower"

[ties]
level = 0.95
resamples = 1000
seed = 20261201
"""
SPLITS = ("test-id", "test-ood", "test-edge")


def card(network, split, name, failed, gap, *, split_hash=None):
    """A scorecard dict following the scorer's contract, built from per-sample columns."""
    failed = np.asarray(failed, dtype=int)
    gap = [None if np.isnan(g) else float(g) for g in np.asarray(gap, dtype=float)]
    ok = np.array([g for g in gap if g is not None])
    n = failed.size
    stats = {"mean": float(ok.mean()) if ok.size else None, "median": None, "p95": None,
             "max": None}
    return {
        "format": "flowgauge-scorecard", "format_version": 1, "flowgauge_version": "0.1.0",
        "split": {"network": network, "split": split,
                  "split_hash": split_hash or f"{network}-{split}".ljust(64, "0")[:64]},
        "predictions_hash": (name + split).ljust(64, "a")[:64],
        "profile": {"name": "default", "version": 1, "tolerances": {}, "hash": "p" * 64},
        "model": {"name": name, "authors": ["Tarrowmere grid lab"], "description": "test entry",
                  "link": "https://example.org/model"},
        "aggregates": {
            "samples": n, "restoration_failure_rate": float(failed.mean()),
            "restoration_failure_causes": {"voltage": float(failed.mean())},
            "raw_gap_pct": stats, "restored_gap_pct": stats,
            "violations": {"restored_voltage_pu": {"share": 0.1, "mean": 0.001, "max": 0.01},
                           "raw_angle_deg": None},  # null: the file gave no angles
            "inference_ms": None, "reference_solve_ms_median": 50.0, "speedup_indicative": None,
            "ci95": {"restoration_failure_rate": [0.0, 0.1], "restored_gap_pct_mean": [0.1, 0.2]}},
        "per_sample": {"sample_id": list(range(n)), "restoration_failed": failed.tolist(),
                       "restored_gap_pct": gap, "raw_gap_pct": gap},
        "scorecard_hash": (name + split + "card").ljust(64, "c")[:64],
    }


def entries_from(spec, network="ieee14"):
    """{entry: {split: (failed, gap)}} -> {entry: {split: Scored}}."""
    return {name: {s: Scored(f"scorecards/{network}/{s}/{name}.json",
                             card(network, s, name, *v)) for s, v in by.items()}
            for name, by in spec.items()}


# --- competition ranking -------------------------------------------------------------------

@pytest.mark.parametrize("tied, expected", [
    # standard competition ranking ("1224"), common practice
    ([False, False, True, False], [1, 2, 2, 4]),
    ([False, True, True], [1, 1, 1]),
    ([False, False, False], [1, 2, 3]),
    ([False, True, False, True], [1, 1, 3, 3]),
    ([], []),
])
def test_competition_ranks(tied, expected):
    assert competition_ranks(tied) == expected


# --- bootstrap -----------------------------------------------------------------------------

def test_bootstrap_matches_scipy_percentile_interval():
    rng = np.random.default_rng(5)
    a = (rng.random(400) < 0.30).astype(float)
    b = (rng.random(400) < 0.18).astype(float)
    lo, hi = paired_bootstrap_interval([a], [b], skip_null=False, resamples=4000, seed=11,
                                       level=0.95)
    # Reference: SciPy's paired percentile bootstrap of the difference in means on the same data
    ref = scipy.stats.bootstrap((a, b), lambda x, y, axis=-1: x.mean(axis) - y.mean(axis),
                                paired=True, vectorized=True, n_resamples=4000,
                                method="percentile", confidence_level=0.95,
                                random_state=np.random.default_rng(3))
    # Monte Carlo noise of two independent 4000-resample runs: well under 0.01 here
    assert lo == pytest.approx(ref.confidence_interval.low, abs=0.01)
    assert hi == pytest.approx(ref.confidence_interval.high, abs=0.01)


def test_bootstrap_combines_splits_by_resampling_within_each():
    # Hand calculation: on split 1 every paired difference is 0.2, on split 2 it is 0.6, so every
    # within-split resample gives 0.2 and 0.6 and their mean 0.4: the interval is [0.4, 0.4].
    # Pooling the samples instead would spread it (different split sizes), so this can fail.
    a = [np.full(10, 0.5), np.full(30, 0.9)]
    b = [np.full(10, 0.3), np.full(30, 0.3)]
    lo, hi = paired_bootstrap_interval(a, b, skip_null=False, resamples=500, seed=1, level=0.95)
    assert (lo, hi) == pytest.approx((0.4, 0.4), abs=1e-12)


def test_bootstrap_skips_null_samples_and_is_deterministic():
    # Hand calculation: the NaN sample is left out of both means; the others differ by exactly 1.
    a = [np.array([2.0, 3.0, np.nan, 5.0])]
    b = [np.array([1.0, 2.0, 7.0, 4.0])]
    first = paired_bootstrap_interval(a, b, skip_null=True, resamples=300, seed=9, level=0.9)
    again = paired_bootstrap_interval(a, b, skip_null=True, resamples=300, seed=9, level=0.9)
    assert first == again
    assert first[0] >= 1.0 - 0.5 * 7  # a resample of only the NaN row is dropped, not counted as 0
    assert not np.isnan(first[0])


# --- ranking -------------------------------------------------------------------------------

def _rules(**change):
    text = RULES
    for old, new in change.items():
        text = text.replace(old.encode(), new.encode())
    return parse_rules(text)


def test_rank_table_ties_neighbours_and_orders_by_keys():
    n = 200
    z, g = np.zeros(n), np.full(n, 1.0)
    fail = lambda k: np.r_[np.ones(k), np.zeros(n - k)]  # noqa: E731
    spec = {
        # 0 failures of 200 on every split: clearly best
        "alpha": {s: (z, g) for s in SPLITS},
        # 100 / 200 and 101 / 200 failures: one sample apart, a tie (hand calculation: the
        # difference 1/200 = 0.005 is far inside a 95% interval of width about 0.1)
        "beta": {s: (fail(100), g) for s in SPLITS},
        "gamma": {s: (fail(101), g) for s in SPLITS},
        # same failures as beta but a larger gap: ordered after beta by the second key
        "delta": {s: (fail(100), g * 2) for s in SPLITS},
        # missing a split: listed as not ranked over all splits
        "eps": {"test-id": (z, g)},
    }
    t = rank_table("ieee14", "all", SPLITS, entries_from(spec), _rules())
    assert [s.entry for s in t.standings] == ["alpha", "beta", "delta", "gamma"]
    assert [s.rank for s in t.standings] == [1, 2, 2, 2]
    assert t.standings[0].diff_ci is None
    assert t.standings[1].diff_ci[0] > 0  # beta - alpha = 0.5 exactly per resample... > 0
    assert t.standings[1].values == pytest.approx((0.5, 1.0))  # 100/200 failures, gap 1 %
    assert t.unranked == (("eps", "no submission for test-ood, test-edge"),)


def test_absolute_gap_key_does_not_let_signs_cancel():
    n = 4
    # hand calculation: gaps +2, -2, +2, -2 have mean 0 but mean |gap| 2; gaps 1, 1, null, 1
    # have mean |gap| 1 (the null sample, a diverged restoration, is left out)
    spec = {"swings": {"test-id": (np.zeros(n), [2.0, -2.0, 2.0, -2.0])},
            "steady": {"test-id": (np.zeros(n), [1.0, 1.0, np.nan, 1.0])}}
    rules = _rules(**{'splits = ["test-id", "test-ood", "test-edge"]': 'splits = ["test-id"]'})
    t = rank_table("ieee14", "test-id", ("test-id",), entries_from(spec), rules)
    assert [(s.entry, s.values[1]) for s in t.standings] == [("steady", 1.0), ("swings", 2.0)]
    # same failure rate (0): the tie test on the first key ties them
    assert [s.rank for s in t.standings] == [1, 1]


def test_rank_table_higher_is_better_direction():
    n = 50
    spec = {"a": {"test-id": (np.zeros(n), np.full(n, 1.0))},
            "b": {"test-id": (np.ones(n), np.full(n, 3.0))}}
    rules = _rules(**{'splits = ["test-id", "test-ood", "test-edge"]': 'splits = ["test-id"]',
                      'metric = "restoration_failure_rate"\ndirection = "lower"':
                      'metric = "restoration_failure_rate"\ndirection = "higher"'})
    t = rank_table("ieee14", "test-id", ("test-id",), entries_from(spec), rules)
    # b fails every sample (rate 1.0), a none (rate 0.0): with "higher is better" b comes first
    assert [(s.rank, s.entry) for s in t.standings] == [(1, "b"), (2, "a")]


def test_rank_table_rejects_scorecards_on_different_samples():
    spec = {"a": {"test-id": (np.zeros(5), np.ones(5))},
            "b": {"test-id": (np.zeros(6), np.ones(6))}}
    rules = _rules(**{'splits = ["test-id", "test-ood", "test-edge"]': 'splits = ["test-id"]'})
    with pytest.raises(InputError, match=r"scorecards/ieee14/test-id/b.json: per_sample sample "
                                         r"ids differ from those of scorecards/ieee14/test-id/a"):
        rank_table("ieee14", "test-id", ("test-id",), entries_from(spec), rules)


# --- rules ---------------------------------------------------------------------------------

def test_rules_parse_and_hash():
    rules = parse_rules(RULES)
    assert rules.splits == SPLITS and rules.networks is None
    assert [(k.metric, k.direction) for k in rules.keys] == [
        ("restoration_failure_rate", "lower"), ("restored_gap_pct_abs_mean", "lower")]
    # SHA-256 of the exact bytes (hashlib is the reference)
    import hashlib
    assert rules.sha256 == hashlib.sha256(RULES).hexdigest()


@pytest.mark.parametrize("old, new, message", [
    ('metric = "restored_gap_pct_abs_mean"', 'metric = "speed"',
     r"rules.toml: keys\[1\].metric: expected a metric name, one of raw_gap_pct_mean, "
     r"restoration_failure_rate, restored_gap_pct_abs_mean, restored_gap_pct_mean(, \w+)*; "
     r"got 'speed'$"),
    ('direction = "lower"\n\n[ties]', 'direction = "down"\n\n[ties]',
     r"rules.toml: keys\[1\].direction: expected which value is better, one of lower, higher; "
     r"got 'down'$"),
    ("resamples = 1000", "resamples = 5",
     r"rules.toml: ties.resamples: expected an integer in \[100, 100000\]; got 5$"),
    ('format_version = 1', 'format_version = 2',
     r"rules.toml: format_version: expected the integer 1; got 2$"),
    ('[scope]', '[scopes]', r"rules.toml: scopes: unknown key 'scopes'; expected one of (\w+, )*"
                            r"format, format_version, keys, published, scope, scoring(, \w+)*$"),
    ('splits = ["test-id", "test-ood", "test-edge"]', 'splits = []',
     r"rules.toml: scope.splits: expected a list of split names, at least 1; got an empty list$"),
    ("level = 0.95", "level = [", r"rules.toml: not valid TOML"),
    # the cases below were accepted silently (or raised AttributeError) before the schema
    ('format_version = 1', 'format_version = true',
     r"rules.toml: format_version: expected the integer 1; got true$"),
    ("level = 0.95", "levle = 0.95",
     r"rules.toml: ties.levle: unknown key 'levle'; expected one of level, resamples, seed$"),
    ('format_version = 1', 'format_version = 1\npublished = "x"',
     r"rules.toml: published: expected a \[published\] table; got 'x'$"),
    ('format_version = 1', 'format_version = 1\nscoring = 5',
     r"rules.toml: scoring: expected a \[scoring\] table; got 5$"),
    ("seed = 20261201", 'seed = 20261201\n\n[scoring]\nprofil = "default"',
     r"rules.toml: scoring.profil: unknown key 'profil'; expected one of profile$"),
    ('networks = "all"', 'networks = "some"',
     r'rules.toml: scope.networks: expected "all" or a list of network names; got \'some\'$'),
    ('direction = "lower"\n\n[ties]', '\n[ties]',
     r"rules.toml: keys\[1\].direction: missing key 'direction'$"),
    ('metric = "restored_gap_pct_abs_mean"', 'metric = "restoration_failure_rate"',
     r"rules.toml: keys: a metric is listed twice$"),
])
def test_rules_errors_name_the_field(old, new, message):
    with pytest.raises(InputError, match=message):
        parse_rules(RULES.replace(old.encode(), new.encode(), 1))


def test_rules_schema_lists_every_rankable_metric():
    from flowgauge.leaderboard import rules_schema
    # guard: the schema's metric names and the ranking's registry are the same set
    assert set(rules_schema()["properties"]["keys"]["items"]["properties"]["metric"]["enum"]) == \
        set(METRICS)


# --- outputs -------------------------------------------------------------------------------

def _outputs(spec=None):
    n = 40
    fail = lambda k: np.r_[np.ones(k), np.zeros(n - k)]  # noqa: E731
    spec = spec or {
        "dc-opf": {s: (fail(4), np.full(n, 0.8)) for s in SPLITS},
        "linear": {s: (fail(20), np.full(n, 2.5)) for s in SPLITS},
        "nearest": {s: (fail(10), np.r_[np.full(n - 1, 1.5), np.nan]) for s in SPLITS},
    }
    rules = parse_rules(RULES)
    entries = {"ieee14": entries_from(spec)}
    records = []
    for name in sorted(spec):
        for s in SPLITS:
            sc = entries["ieee14"][name][s]
            records.append({"submission": f"submissions/ieee14/{s}/{name}.json",
                            "network": "ieee14", "split": s, "entry": name,
                            "predictions_hash": sc.card["predictions_hash"],
                            "scorecard": sc.where, "scorecard_hash": sc.card["scorecard_hash"],
                            "split_hash": sc.card["split"]["split_hash"]})
    tables = (rank_table("ieee14", "all", SPLITS, entries["ieee14"], rules),
              *(rank_table("ieee14", s, (s,), entries["ieee14"], rules) for s in SPLITS))
    return render_outputs(board=Path("lb"), rules=rules, records=records, tables=tables,
                          entries=entries, splits_used=[], notes=["a note"]), records


def test_outputs_are_deterministic_and_sealed():
    first, _ = _outputs()
    second, _ = _outputs()
    assert first == second
    for name, data in first.items():
        digest = check_seal(data, name)
        # the seal is the SHA-256 of every byte before the last line (hashlib is the reference)
        import hashlib
        assert digest == hashlib.sha256(data[: data.rstrip(b"\n").rfind(b"\n") + 1]).hexdigest()


def test_seal_catches_one_changed_byte():
    outputs, _ = _outputs()
    data = outputs["ranking.md"].replace(b"0.1000", b"0.1001", 1)
    with pytest.raises(IntegrityError, match=r"ranking.md: records content hash [0-9a-f]{64}, "
                                             r"its content hashes to [0-9a-f]{64}"):
        check_seal(data, "ranking.md")


def test_csv_reads_back_with_pandas():
    import pandas as pd
    outputs, records = _outputs()
    df = pd.read_csv(io.BytesIO(outputs["ranking.csv"]), comment="#", dtype={"rank": int})
    overall = df[df.scope == "all"]
    # hand calculation: failure rates 4/40 = 0.1, 10/40 = 0.25, 20/40 = 0.5 on every split
    assert overall.entry.tolist() == ["dc-opf", "nearest", "linear"]
    assert overall.restoration_failure_rate.tolist() == pytest.approx([0.1, 0.25, 0.5])
    # nearest - dc-opf: 6 of 40 paired samples differ by 1 on each split; normal approximation
    # by hand: 0.15 +- 1.96 * sqrt(0.15 * 0.85 / 40 / 3) = [0.086, 0.214], clear of zero, and
    # linear - nearest: 0.25 +- 1.96 * sqrt(0.25 * 0.75 / 40 / 3) = [0.173, 0.327]: no ties
    assert overall["rank"].tolist() == [1, 2, 3]
    assert overall.diff_to_above_ci_low.tolist()[1:] == pytest.approx([0.086, 0.173], abs=0.015)
    assert overall.diff_to_above_ci_high.tolist()[1:] == pytest.approx([0.214, 0.327], abs=0.015)
    row = overall.iloc[0]
    assert row.predictions_sha256.split() == [r["predictions_hash"] for r in records
                                             if r["entry"] == "dc-opf"]
    assert set(df.rules_sha256) == {parse_rules(RULES).sha256}
    assert set(df.flowgauge_version) == {"0.1.0"}


def test_latex_uses_booktabs_and_escapes():
    outputs, _ = _outputs()
    tex = outputs["ranking.tex"].decode()
    body = tex[tex.index(r"\begin{tabular}"):tex.index(r"\end{tabular}")]
    assert [m for m in re.findall(r"\\(toprule|midrule|bottomrule)", body)] == [
        "toprule", "midrule", "bottomrule"]
    assert r"test-id & test-ood & test-edge" in body
    assert r"mean \textbar{}restored gap\textbar{} [\%]" in body  # "|" and "%" escaped for LaTeX
    # every data row has as many cells as the column spec: rank, entry, 3 splits, 2 keys
    rows = [l for l in body.splitlines() if l.strip().endswith(r"\\")]
    assert all(l.count("&") == 6 for l in rows) and len(rows) == 4


def test_markdown_has_caution_tables_and_hashes():
    outputs, records = _outputs()
    md = outputs["ranking.md"].decode()
    assert CAUTION in md
    assert "| 1 | dc-opf | 0.1000 | 0.800 |" in md  # 4/40 failures, 0.8 % gap (hand calculation)
    for r in records:
        assert f"`{r['scorecard_hash']}`" in md and f"`{r['predictions_hash']}`" in md


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.ids = [], set()

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.ids.update(v for k, v in attrs if k == "id")


def test_page_is_self_contained_html():
    outputs, _ = _outputs()
    html = outputs["index.html"].decode()
    parser = _Collect()  # Python's html.parser as an outside reader of the page
    parser.feed(html)
    assert parser.tags.count("svg") == 2
    assert {"table-ieee14-all", "table-ieee14-test-id", "caution"} <= parser.ids
    assert "Tarrowmere grid lab" in html
    # nothing is fetched: no src/href to another host, no stylesheet or script links
    assert not re.search(r'(src|href)="(https?:)?//(?!example\.org/model)', html)
    assert "<link" not in html and "<script src" not in html
    assert "Date" not in html.split("<svg", 1)[1][:2000]  # no date in the plot metadata
