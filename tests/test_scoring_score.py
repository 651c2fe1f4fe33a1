"""score() end to end on small built splits: the reference solution scores perfectly, the
scorecard is the same bytes whatever the workers or a Dask cluster, and the scorecard records
what it should."""

import json
from pathlib import Path

import jsonschema
import numpy as np
import pytest

from flowgauge.errors import InputError
from flowgauge.scoring import DEFAULT_PROFILE, read_scorecard, score
from flowgauge.submission import write_predictions

from test_scoring_support import MODEL, split, split_path, write_reference

SCHEMA = json.loads((Path(__file__).parents[1] / "src/flowgauge/schema/scorecard.schema.json").read_text())


@pytest.mark.parametrize("network, samples", [("ieee14", 20), ("ieee30", 6), ("ieee118", 6)])
def test_reference_solution_scores_perfectly(network, samples, tmp_path):
    sp = split(network, "test-id", samples)
    card = score(write_reference(sp, tmp_path / "ref.json"), sp)
    a = card.aggregates
    # The reference solution is the optimum: raw gap 0 up to the 10-significant-digit file
    # rounding, no violation beyond the common-practice tolerances, and no restoration failure.
    assert a["samples"] == samples
    assert max(abs(a["raw_gap_pct"]["max"]), abs(a["raw_gap_pct"]["mean"])) < 1e-7
    assert a["restoration_failure_rate"] == 0.0
    assert all(share == 0.0 for share in a["restoration_failure_causes"].values())
    assert all(v["share"] == 0.0 for v in a["violations"].values())
    # Restored gap within the reference solver's tolerance: its 1e-6 p.u. feasibility tolerance
    # moves the reference bus output by at most ~1e-4 MW, i.e. about 1e-5 % of cost (an
    # independent check on 14, 30 and 118 buses saw about 1e-6 %).
    table = card.per_sample
    assert np.abs(table["restored_gap_pct"]).max() < 1e-4
    assert table["restoration_converged"].all()
    assert table["sample_id"].is_monotonic_increasing


def test_scorecard_contents(tmp_path):
    sp = split("ieee14", "test-id")
    card = score(write_reference(sp, tmp_path / "ref.json", full=False), sp)
    doc = read_scorecard(card.write(tmp_path / "card.json"))
    jsonschema.validate(doc, SCHEMA)
    assert doc["split"] == {"network": "ieee14", "split": "test-id", "split_hash": sp.split_hash}
    assert doc["profile"]["hash"] == DEFAULT_PROFILE.hash
    assert doc["model"] == MODEL
    assert doc["per_sample"]["sample_id"] == sorted(sp.sample_id.tolist())
    # without va_deg and qg_mvar the full-state families are not evaluated
    assert doc["aggregates"]["violations"]["raw_balance_mw"] is None
    assert doc["aggregates"]["violations"]["raw_reactive_power_mvar"] is None
    assert doc["aggregates"]["inference_ms"] is None and doc["aggregates"]["speedup_indicative"] is None
    # the manifest's median reference solve time, in ms
    ms = doc["aggregates"]["reference_solve_ms_median"]
    assert ms == pytest.approx(1000 * sp.manifest["reference_solve_seconds"]["median"], rel=1e-9)


def test_gap_and_restoration_of_a_shifted_dispatch(tmp_path):
    sp = split("ieee14", "test-id")
    r = sp.references
    # Hand calculation: moving 5 MW from the reference-bus generator (bus 1) to generator 2
    # (bus 2) changes the raw cost by c(pg2+5) - c(pg2) + c(pg1-5) - c(pg1); the restoration then
    # gives the reference bus back whatever the network needs, so its gap stays near the raw one.
    pg = r.pg_mw.copy()
    pg[:, 0] -= 5.0
    pg[:, 1] += 5.0
    write_predictions(sp, pg_mw=pg, vm_pu=r.vm_pu, model=MODEL, path=tmp_path / "p.json")
    card = score(tmp_path / "p.json", sp)
    c2, c1 = sp.network.cost_c2, sp.network.cost_c1
    delta = (c2[1] * ((r.pg_mw[:, 1] + 5) ** 2 - r.pg_mw[:, 1] ** 2) + 5 * c1[1]
             + c2[0] * ((r.pg_mw[:, 0] - 5) ** 2 - r.pg_mw[:, 0] ** 2) - 5 * c1[0])
    order = np.argsort(sp.sample_id)
    expected = 100 * delta[order] / np.abs(r.objective[order])
    np.testing.assert_allclose(card.per_sample["raw_gap_pct"], expected, rtol=1e-6, atol=1e-9)
    # Moving output away from the optimum cannot make the restored point cheaper than optimal.
    assert (card.per_sample["restored_gap_pct"] > -1e-4).all()


def test_same_bytes_whatever_workers_or_dask(tmp_path):
    from distributed import Client, LocalCluster

    sp = split("ieee14", "train")  # 130 samples: three restoration chunks
    r = sp.references
    rng = np.random.default_rng(3)
    pg = r.pg_mw * rng.uniform(0.9, 1.1, r.pg_mw.shape)
    write_predictions(sp, pg_mw=pg, vm_pu=r.vm_pu, model=MODEL, path=tmp_path / "p.json")
    one = score(tmp_path / "p.json", sp).to_bytes()
    two = score(tmp_path / "p.json", sp, workers=2).to_bytes()
    assert one == two
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        dask = score(tmp_path / "p.json", sp, scheduler=cluster.scheduler_address).to_bytes()
    assert dask == one


def test_bad_options(tmp_path, monkeypatch):
    monkeypatch.setattr("flowgauge.scoring._restoration.SCHEDULER_TIMEOUT_S", 1)
    sp = split("ieee14", "test-id")
    path = write_reference(sp, tmp_path / "ref.json")
    with pytest.raises(InputError, match=r"The 'workers' parameter of score must be an integer >= 1. Got 0"):
        score(path, sp, workers=0)
    with pytest.raises(InputError, match="unknown scoring profile 'lenient'; known profiles: reactive-limits, strict"):
        score(path, sp, profile="lenient")
    with pytest.raises(InputError, match="cannot connect to a Dask scheduler"):
        score(path, sp, scheduler="tcp://127.0.0.1:9")


def test_split_found_by_hash_and_json_equals_parquet(tmp_path, monkeypatch):
    folder = split_path("ieee14", "test-id")
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(folder.parents[1]))  # <root>/<network>/<split>
    sp = split("ieee14", "test-id")
    as_json = score(write_reference(sp, tmp_path / "ref.json")).to_bytes()
    as_parquet = score(write_reference(sp, tmp_path / "ref.parquet", format="parquet")).to_bytes()
    # the same predictions give the same scorecard bytes whatever the file format
    assert as_json == as_parquet


def test_split_without_references_cannot_be_scored(tmp_path):
    import shutil
    sp = split("ieee14", "test-id")
    published = tmp_path / "ieee14" / "test-id"
    shutil.copytree(split_path("ieee14", "test-id"), published)
    (published / sp.manifest["files"]["references"]["path"]).unlink()  # as a published split ships
    path = write_reference(sp, tmp_path / "ref.json")
    with pytest.raises(InputError, match="the split has no reference solutions"):
        score(path, published)
