"""Predictions for the frozen splits in the repository: the reference solution written as a
predictions file validates against its split, found by hash, and common slips are caught.

Outside reference for the element counts: the IEEE 14-bus system's published data (14 buses,
5 generators). The split files themselves are the frozen data under splits/.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from flowgauge.cli import main
from flowgauge.splits import list_splits, load_split
from flowgauge.submission import check_predictions, load_predictions, validate_predictions, write_predictions

MODEL = {"name": "reference solution", "authors": ["flowgauge tests"],
         "description": "The split's own reference OPF solution.", "training_data_only": True}

pytestmark = pytest.mark.skipif(
    not any(p.parent.name == "ieee14" and p.name == "test-id" for p in list_splits()),
    reason="the frozen split ieee14/test-id is not in this checkout")


@pytest.fixture(scope="module")
def ieee14_test():
    return load_split("ieee14", "test-id")


@pytest.fixture(scope="module")
def reference_json(ieee14_test, tmp_path_factory):
    r = ieee14_test.references
    path = tmp_path_factory.mktemp("frozen") / "reference.json"
    write_predictions(ieee14_test, pg_mw=r.pg_mw, vm_pu=r.vm_pu, va_deg=r.va_deg, qg_mvar=r.qg_mvar,
                      model=MODEL, path=path)
    return path


def test_reference_solution_is_valid_and_found_by_hash(reference_json, ieee14_test, capsys):
    rc = main(["validate", str(reference_json)])
    out, err = capsys.readouterr()
    assert rc == 0 and err == ""
    assert "500 samples for ieee14/test-id (json; pg_mw, vm_pu, va_deg, qg_mvar;" in out
    pred = load_predictions(reference_json)
    assert pred.split_hash == ieee14_test.split_hash
    # IEEE 14-bus published data: 5 generators, 14 buses.
    assert pred.pg_mw.shape == (500, 5) and pred.vm_pu.shape == (500, 14)
    np.testing.assert_allclose(pred.vm_pu, ieee14_test.references.vm_pu, rtol=1e-9, atol=0)


def test_parquet_of_the_reference_hashes_like_the_json(reference_json, ieee14_test, tmp_path):
    r = ieee14_test.references
    pq = write_predictions(ieee14_test, pg_mw=r.pg_mw, vm_pu=r.vm_pu, va_deg=r.va_deg, qg_mvar=r.qg_mvar,
                           model=MODEL, path=tmp_path / "reference.parquet")
    assert pq.content_hash == load_predictions(reference_json).content_hash
    assert check_predictions(tmp_path / "reference.parquet").valid


def test_checked_against_another_split(reference_json, capsys):
    other = [p for p in list_splits() if p.parent.name == "ieee14" and p.name != "test-id"][0]
    rc = main(["validate", str(reference_json), "--split", str(other)])
    _, err = capsys.readouterr()
    assert rc == 2 and "/split/split_hash: the file answers split " in err
    assert "but was checked against split" in err and f"(ieee14/{other.name})" in err


def test_missing_samples_and_voltages_in_kv(reference_json, tmp_path, capsys):
    doc = json.loads(reference_json.read_text())
    del doc["samples"][-3:]
    for s in doc["samples"][:10]:
        s["vm_pu"] = [v * 138.0 for v in s["vm_pu"]]  # kV at 138 kV buses: 10 x 14 = 140 errors
    (tmp_path / "p.json").write_text(json.dumps(doc))
    report = validate_predictions(tmp_path / "p.json")
    assert report.n_errors == 141
    assert report.errors[0].where == "/samples" and report.errors[0].message == "3 of the split's 500 sample ids are missing: 497, 498, 499"
    rc = main(["validate", str(tmp_path / "p.json")])
    _, err = capsys.readouterr()
    assert rc == 2 and err.splitlines()[-1] == "  ... and 121 more errors"
