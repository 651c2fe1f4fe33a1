"""Predictions for a frozen split in the repository (ieee14/test-id, else demo/test-id): the
reference solution written as a predictions file validates against its split, found by hash,
and common slips are caught.

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

# (network, split) preferred first; IEEE 14-bus published data: 14 buses, 5 generators.
CANDIDATES = (("ieee14", "test-id", (14, 5)), ("demo", "test-id", None))
FROZEN = [c for c in CANDIDATES if any((p.parent.name, p.name) == c[:2] for p in list_splits())]
pytestmark = pytest.mark.skipif(not FROZEN, reason="no frozen test-id split of ieee14 or demo here")


@pytest.fixture(scope="module")
def frozen_split():
    """The frozen ieee14/test-id split (demo/test-id while ieee14 is being refrozen)."""
    return load_split(*FROZEN[0][:2])


@pytest.fixture(scope="module")
def reference_json(frozen_split, tmp_path_factory):
    r = frozen_split.references
    path = tmp_path_factory.mktemp("frozen") / "reference.json"
    write_predictions(frozen_split, pg_mw=r.pg_mw, vm_pu=r.vm_pu, va_deg=r.va_deg, qg_mvar=r.qg_mvar,
                      model=MODEL, path=path)
    return path


def test_reference_solution_is_valid_and_found_by_hash(reference_json, frozen_split, capsys):
    rc = main(["validate", str(reference_json)])
    out, err = capsys.readouterr()
    assert rc == 0 and err == ""
    n = frozen_split.n_samples
    label = "/".join(FROZEN[0][:2])
    assert f"valid {reference_json}: {n} samples for {label} (json)\n" in out
    assert "; fields pg_mw, vm_pu, va_deg, qg_mvar\n" in out
    pred = load_predictions(reference_json)
    assert pred.split_hash == frozen_split.split_hash
    n_bus, n_gen = FROZEN[0][2] or (len(frozen_split.bus_id), len(frozen_split.gen_id))
    assert pred.pg_mw.shape == (n, n_gen) and pred.vm_pu.shape == (n, n_bus)
    np.testing.assert_allclose(pred.vm_pu, frozen_split.references.vm_pu, rtol=1e-9, atol=0)


def test_parquet_of_the_reference_hashes_like_the_json(reference_json, frozen_split, tmp_path):
    r = frozen_split.references
    pq = write_predictions(frozen_split, pg_mw=r.pg_mw, vm_pu=r.vm_pu, va_deg=r.va_deg, qg_mvar=r.qg_mvar,
                           model=MODEL, path=tmp_path / "reference.parquet")
    assert pq.content_hash == load_predictions(reference_json).content_hash
    assert check_predictions(tmp_path / "reference.parquet").valid


def test_checked_against_another_split(reference_json, capsys):
    others = [p for p in list_splits() if p.parent.name == FROZEN[0][0] and p.name != "test-id"]
    if not others:
        pytest.skip(f"no second frozen {FROZEN[0][0]} split in this checkout")
    other = others[0]
    rc = main(["validate", str(reference_json), "--split", str(other)])
    _, err = capsys.readouterr()
    assert rc == 2 and "/split/split_hash: the file answers split " in err
    assert "but was checked against split" in err and f"({FROZEN[0][0]}/{other.name})" in err


def test_missing_samples_and_voltages_in_kv(reference_json, frozen_split, tmp_path, capsys):
    doc = json.loads(reference_json.read_text())
    del doc["samples"][-3:]
    for s in doc["samples"][:10]:
        s["vm_pu"] = [v * 138.0 for v in s["vm_pu"]]  # kV at 138 kV buses: one error per bus
    (tmp_path / "p.json").write_text(json.dumps(doc))
    report = validate_predictions(tmp_path / "p.json")
    n_bus = len(frozen_split.bus_id)
    assert report.n_errors == 10 * n_bus + 1
    last = ", ".join(str(i) for i in frozen_split.sample_id[-3:])
    assert report.errors[0].where == "/samples"
    assert report.errors[0].message == f"3 of the split's {frozen_split.n_samples} sample ids are missing: {last}"
    rc = main(["validate", str(tmp_path / "p.json")])
    _, err = capsys.readouterr()
    assert rc == 2 and err.splitlines()[-1] == f"  ... and {10 * n_bus + 1 - 20} more errors"
