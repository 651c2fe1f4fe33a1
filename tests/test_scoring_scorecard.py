"""Scorecard file, its hash check, the JSON Schema, the profile and the aggregation helpers."""

import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest

from flowgauge.errors import InputError, IntegrityError
from flowgauge.scoring import DEFAULT_PROFILE, Scorecard, get_profile, read_scorecard
from flowgauge.scoring._aggregate import bootstrap_ci, summary_stats, violation_stats

SCHEMA = json.loads((Path(__file__).parents[1] / "src/flowgauge/schema/scorecard.schema.json").read_text())


def _card(gaps=(0.5, np.nan, 1.25)):
    from flowgauge.scoring._score import FAMILY_TOLERANCE
    from flowgauge.scoring import CAUSES
    n = len(gaps)
    table = pd.DataFrame({"sample_id": np.arange(n), "raw_gap_pct": np.linspace(0, 1, n),
                          "restored_gap_pct": np.array(gaps), "restoration_failed": np.isnan(gaps)})
    stats = {"mean": 1.0, "median": 1.0, "p95": 1.0, "max": 1.0}
    aggregates = {"samples": n, "restoration_failure_rate": 1 / 3,
                  "restoration_failure_causes": {c: 0.0 for c in CAUSES},
                  "raw_gap_pct": stats, "restored_gap_pct": stats,
                  "violations": {f: None for f in FAMILY_TOLERANCE}, "inference_ms": None,
                  "reference_solve_ms_median": 12.5, "speedup_indicative": None,
                  "ci95": {"restoration_failure_rate": [0.0, 1.0], "restored_gap_pct_mean": None}}
    header = {"format": "flowgauge-scorecard", "format_version": 1, "flowgauge_version": "0.1.0",
              "split": {"network": "ieee14", "split": "test-id", "split_hash": "a" * 64},
              "predictions_hash": "b" * 64, "profile": DEFAULT_PROFILE.to_dict(), "model": {"name": "m"}}
    return Scorecard(header=header, aggregates=aggregates, per_sample=table)


def test_write_read_round_trip_and_schema(tmp_path):
    path = _card().write(tmp_path / "card.json")
    doc = read_scorecard(path)
    jsonschema.validate(doc, SCHEMA)  # the written file satisfies its own published schema
    assert doc["per_sample"]["restored_gap_pct"] == [0.5, None, 1.25]
    assert doc["per_sample"]["restoration_failed"] == [0, 1, 0]
    # canonical JSON: sorted keys, floats at 10 significant digits (1/3 -> 0.3333333333)
    raw = path.read_bytes()
    assert b'"restoration_failure_rate":0.3333333333' in raw
    assert raw == _card().to_bytes()  # same content, same bytes
    assert not list(tmp_path.glob(".*.tmp"))  # the atomic write left no temporary file


def test_tampered_scorecard_fails_its_hash(tmp_path):
    path = _card().write(tmp_path / "card.json")
    doc = json.loads(path.read_text())
    doc["aggregates"]["restoration_failure_rate"] = 0.0
    path.write_text(json.dumps(doc))
    with pytest.raises(IntegrityError, match="does not match its scorecard_hash"):
        read_scorecard(path)


@pytest.mark.parametrize("content, message", [
    (b"{not json", "not JSON"),
    (b'{"format": "something-else"}', "not a scorecard"),
    (b'{"format": "flowgauge-scorecard", "format_version": 9}', "unknown scorecard format_version 9"),
    (b'{"format": "flowgauge-scorecard", "format_version": 1}', "missing the scorecard_hash"),
])
def test_bad_scorecard_files(tmp_path, content, message):
    path = tmp_path / "card.json"
    path.write_bytes(content)
    with pytest.raises(InputError, match=message):
        read_scorecard(path)
    with pytest.raises(InputError, match="cannot read the scorecard"):
        read_scorecard(tmp_path / "missing.json")


def test_strict_profile_is_the_version_1_profile_unchanged():
    # docs/metrics.md documents these common-practice tolerances; the strict profile is the
    # profile of scorecard format 1, recorded under its old name, with the same hash as before
    # profile 2 existed, so its scorecards stay the same bytes.
    strict = get_profile("strict")
    assert strict.to_dict()["name"] == "default" and strict.version == 1
    assert dict(strict.tolerances) == {
        "active_power_mw": 0.1, "reactive_power_mvar": 0.1, "balance_mw": 0.1, "balance_mvar": 0.1,
        "voltage_pu": 0.001, "thermal_pct_of_rating": 0.5, "angle_deg": 0.1}
    assert dict(strict.powerflow) == {"start": "dc", "tolerance_pu": 1e-8, "max_iterations": 20}
    assert strict.hash == "f481ecd70bfae94999c50b5083c6fedc0516fb856dc12dd8ad8c3d66499be604"


def test_default_profile_is_the_documented_one():
    # docs/metrics.md documents profile 2 and the reason for each tolerance
    assert DEFAULT_PROFILE is get_profile(None) is get_profile("reactive-limits")
    assert DEFAULT_PROFILE.to_dict()["name"] == "reactive-limits" and DEFAULT_PROFILE.version == 2
    assert dict(DEFAULT_PROFILE.tolerances) == {
        "active_power_mw": 0.1, "active_power_pct_of_rating": 1.0, "reactive_power_mvar": 0.1,
        "reactive_power_pct_of_rating": 1.0, "balance_mw": 0.1, "balance_mvar": 0.1, "voltage_pu": 0.001,
        "thermal_pct_of_rating": 1.0, "angle_deg": 0.1}
    assert set(DEFAULT_PROFILE.reasons) == set(DEFAULT_PROFILE.tolerances)
    assert DEFAULT_PROFILE.powerflow["enforce_q_limits"] is True
    assert DEFAULT_PROFILE.grading["solved_threshold_pct"] == 1.0


@pytest.mark.parametrize("name, message", [
    ("lenient", r"unknown scoring profile 'lenient'; known profiles: reactive-limits, strict"),
    ("default", r"the profile called 'default' before version 2 is now called 'strict'"),
])
def test_unknown_profile_lists_the_known_ones(name, message):
    with pytest.raises(InputError, match=message):
        get_profile(name)


def test_summary_and_violation_stats_by_hand():
    # Hand calculation: values 1..5 and a NaN (left out): mean 3, median 3, p95 = 4 + 0.8 * 1 = 4.8, max 5.
    assert summary_stats(np.array([1, 2, 3, 4, 5, np.nan])) == {"mean": 3.0, "median": 3.0, "p95": 4.8, "max": 5.0}
    assert summary_stats(np.array([np.nan])) is None
    # Hand calculation: magnitudes [0, 0.2, NaN, 0.4]; the NaN sample was not evaluated; violating
    # flags [F, T, T, T] on the evaluated samples [0, 1, 3] are [F, T, T] -> share 2/3; mean 0.2, max 0.4.
    v = violation_stats(np.array([0, 0.2, np.nan, 0.4]), np.array([False, True, True, True]))
    assert v == pytest.approx({"share": 2 / 3, "mean": 0.2, "max": 0.4})


def test_bootstrap_is_reproducible_and_sane():
    x = np.r_[np.zeros(70), np.ones(30)]
    a = bootstrap_ci({"x": x, "nan": np.full(100, np.nan)}, resamples=500, seed=3, level=0.95)
    b = bootstrap_ci({"x": x, "nan": np.full(100, np.nan)}, resamples=500, seed=3, level=0.95)
    assert a == b and a["nan"] is None
    lo, hi = a["x"]
    # Common practice (normal approximation): 0.3 +- 1.96 * sqrt(0.3 * 0.7 / 100) = [0.21, 0.39]
    assert 0.19 <= lo <= 0.23 and 0.37 <= hi <= 0.41
    # a constant column has a zero-width interval
    assert bootstrap_ci({"c": np.full(10, 2.5)}, resamples=50, seed=1, level=0.95)["c"] == [2.5, 2.5]
