"""Building splits: references checked against PYPOWER, resume after an interruption, local
processes and a Dask cluster give the same hashes, verify / publish / show on the command line."""

import json
import re
import shutil

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.network import load_network, to_ppc
from flowgauge.splits import build_split, find_split, load_split, verify_split
from flowgauge.splits._builder import partial_dir

SEED = 42


def _hashes(manifest):
    f = manifest["files"]
    return f["inputs"]["hash"], f["references"]["solution_hash"]


@pytest.fixture(scope="module")
def root(tmp_path_factory):
    return tmp_path_factory.mktemp("splits")


@pytest.fixture(scope="module")
def built(root):
    out = root / "ieee14" / "test-id"
    return out, build_split("ieee14", "test-id", samples=8, seed=SEED, out=out, chunk=4)


def test_references_agree_with_pypower(built):
    from pypower.api import ppoption, runopf
    from pypower.idx_bus import VM
    from pypower.idx_gen import PG
    s = load_split(built[0])
    assert s.pd_mw.shape == (8, 11) and s.references.pg_mw.shape == (8, 5)
    for i in (0, 5):
        # reference library: PYPOWER 5.1.21 runopf (MIPS interior point) on the same loading
        r = runopf(to_ppc(s.network, s.pd_mw[i], s.qd_mvar[i]), ppoption(VERBOSE=0, OUT_ALL=0))
        assert r["success"]
        assert s.references.objective[i] == pytest.approx(r["f"], rel=1e-5)
        # dispatch to 0.2 MW: between generators of equal cost the objective moves by less than
        # either solver's stopping tolerance (1e-6 relative) for shifts of this size
        np.testing.assert_allclose(s.references.pg_mw[i], r["gen"][:, PG], atol=0.2)
        np.testing.assert_allclose(s.references.vm_pu[i], r["bus"][:, VM], atol=1e-3)


def test_manifest_records_what_was_built(built):
    out, m = built
    net = load_network("ieee14")
    assert m["samples"] == 8 and m["seed"] == SEED and m["split"] == "test-id"
    assert m["design"]["name"] == "spanning"
    assert m["elements"]["load_id"] == net.load_id.tolist()
    assert m["draws"] == 8 + sum(m["rejected"].values())
    assert set(m["solver"]) >= {"feasibility_tol", "max_iter"}
    assert json.loads((out / "manifest.json").read_text()) == m
    assert verify_split(out).references_present
    assert not partial_dir(out).exists()


def test_resume_after_interruption_gives_the_same_hashes(built, tmp_path):
    out = tmp_path / "ieee14" / "test-id"
    seen = []

    def stop_after_first_chunk(p):
        seen.append(p)
        if p.solved >= 4:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        build_split("ieee14", "test-id", samples=8, seed=SEED, out=out, chunk=4, progress=stop_after_first_chunk)
    assert not out.exists()  # nothing half-written where the split goes
    assert len(list((partial_dir(out) / "chunks").glob("*.npz"))) == 1
    progress = []
    m = build_split("ieee14", "test-id", samples=8, seed=SEED, out=out, chunk=4, progress=progress.append)
    assert progress[0].resumed == 4
    assert _hashes(m) == _hashes(built[1])


def test_two_local_workers_give_the_same_hashes(built, tmp_path):
    m = build_split("ieee14", "test-id", samples=8, seed=SEED, out=tmp_path / "w2", chunk=2, workers=2)
    assert _hashes(m) == _hashes(built[1])


def test_dask_cluster_gives_the_same_hashes(built, tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        m = build_split("ieee14", "test-id", samples=8, seed=SEED, out=tmp_path / "dask", chunk=3,
                        scheduler=cluster.scheduler_address)
    assert _hashes(m) == _hashes(built[1])


def _rewrite_value(path, column, row, col, delta):
    t = pq.read_table(path)
    arr = t.column(column).combine_chunks()
    m = arr.flatten().to_numpy().reshape(len(arr), -1).copy()
    m[row, col] += delta
    new = pa.FixedSizeListArray.from_arrays(pa.array(m.ravel()), m.shape[1])
    pq.write_table(t.set_column(t.column_names.index(column), column, new), path)


def test_verify_catches_one_changed_value(built, tmp_path, capsys):
    copy = tmp_path / "copy"
    shutil.copytree(built[0], copy)
    assert main(["splits", "verify", str(copy)]) == 0
    _rewrite_value(copy / "references.parquet", "pg_mw", 3, 1, 1e-4)
    capsys.readouterr()
    assert main(["splits", "verify", str(copy)]) == 3
    err = capsys.readouterr().err
    assert "references.parquet: column pg_mw differs from the manifest" in err


def test_verify_catches_a_changed_manifest(built, tmp_path, capsys):
    copy = tmp_path / "copy"
    shutil.copytree(built[0], copy)
    text = (copy / "manifest.json").read_text().replace(f'"seed": {SEED}', '"seed": 43')
    (copy / "manifest.json").write_text(text)
    assert main(["splits", "verify", str(copy)]) == 3
    assert "manifest.json: split_hash recorded" in capsys.readouterr().err


def test_publish_withholds_references_but_commits_to_them(built, tmp_path, capsys):
    pub = tmp_path / "pub"
    assert main(["splits", "publish", str(built[0]), "--out", str(pub)]) == 0
    assert sorted(p.name for p in pub.iterdir()) == ["inputs.parquet", "manifest.json"]
    assert (pub / "manifest.json").read_bytes() == (built[0] / "manifest.json").read_bytes()
    assert main(["splits", "verify", str(pub)]) == 0
    assert "references withheld" in capsys.readouterr().out
    s = load_split(pub)
    assert not s.has_references and s.split_hash == built[1]["split_hash"]


def test_find_and_show_frozen_splits(built, root, monkeypatch, capsys):
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(root))
    assert find_split(built[1]["split_hash"]) == built[0]
    assert load_split("ieee14", "test-id").n_samples == 8
    assert main(["splits", "show", "ieee14"]) == 0
    out = capsys.readouterr().out
    assert "Frozen splits of ieee14" in out
    assert re.search(r"^test-id\s+8\s+\d+/\d+/\d+\s+\d+\s+\d+%\s+\d+%\s+0\s", out, re.M), out


@pytest.mark.parametrize("args, message", [
    (["--workers", "0"], "Invalid value for '--workers': 0 is not in the range x>=1"),
    (["--split", "val"], "Invalid value for '--split'"),
])
def test_build_rejects_bad_options(tmp_path, capsys, args, message):
    base = ["splits", "build", "ieee14", "--split", "test-id", "--samples", "2", "--seed", "1",
            "--out", str(tmp_path / "x")]
    assert main(base + args) == 2
    assert message in capsys.readouterr().err


def test_build_refuses_a_finished_split_and_unknown_network(built, tmp_path, capsys):
    args = ["--split", "test-id", "--samples", "2", "--seed", "1", "--quiet"]
    assert main(["splits", "build", "ieee14", *args, "--out", str(built[0])]) == 2
    assert "already holds a finished split" in capsys.readouterr().err
    assert main(["splits", "build", "nowhere", *args, "--out", str(tmp_path / "y")]) == 2
    assert "nowhere: not a bundled network and no such file" in capsys.readouterr().err


def test_out_of_distribution_build_tags_kinds_and_unseen_regimes(tmp_path):
    root = tmp_path / "ieee14"
    build_split("ieee14", "train", samples=12, seed=3, out=root / "train", chunk=6)
    m = build_split("ieee14", "test-ood", samples=6, seed=4, out=root / "test-ood", chunk=3)
    s, train = load_split(root / "test-ood"), load_split(root / "train")
    assert s.kind.tolist() == ["power-factor", "concentrated", "unseen-regime"] * 2
    # every unseen-regime sample's binding-limit set is absent from the training split, and the
    # per-sample flag says so (recomputed here from the two reference tables)
    in_train = np.isin(s.references.signature, train.references.signature)
    assert not in_train[s.kind == "unseen-regime"].any()
    assert np.array_equal(s.references.regime_seen_in_train, in_train)
    assert m["train"]["split_hash"] == train.split_hash
    assert m["coverage"]["kinds"] == {"concentrated": 2, "power-factor": 2, "unseen-regime": 2}
    assert all(k.split(": ")[0] in ("power-factor", "concentrated", "unseen-regime", "loadability-infeasible", "loadability-iteration_limit", "loadability-no-feasible-load")
               for k in m["rejected"])
    assert m["draws"] == 6 + sum(m["rejected"].values())


def test_out_of_distribution_build_needs_the_training_split(tmp_path):
    with pytest.raises(InputError, match="build train first beside this split"):
        build_split("ieee14", "test-ood", samples=2, seed=4, out=tmp_path / "ieee14" / "test-ood")
    assert not (tmp_path / "ieee14").exists() or not any((tmp_path / "ieee14").iterdir())


def test_edge_build_records_margins_and_binding_limits(tmp_path):
    m = build_split("ieee14", "test-edge", samples=3, seed=5, out=tmp_path / "edge", chunk=3)
    s = load_split(tmp_path / "edge")
    assert np.all((s.references.margin >= 0.002) & (s.references.margin <= 0.03))
    assert min(len(b) for b in s.references.binding) >= 1
    assert m["design"]["name"] == "edge"


def test_a_network_file_is_stored_with_its_split(tmp_path):
    from flowgauge.network import write_network_json
    net = load_network("ieee14").replace(name="island-north")
    write_network_json(net, tmp_path / "north.json")
    build_split(tmp_path / "north.json", "test-id", samples=2, seed=1, out=tmp_path / "s", chunk=2)
    assert (tmp_path / "s" / "network.json").exists()
    s = load_split(tmp_path / "s")
    assert s.network.name == "island-north" and verify_split(tmp_path / "s").samples == 2


def test_unreachable_scheduler_is_one_message_and_leaves_nothing(tmp_path, capsys):
    out = tmp_path / "x"
    rc = main(["splits", "build", "ieee14", "--split", "test-id", "--samples", "2", "--seed", "1",
               "--out", str(out), "--scheduler", "nonsense", "--quiet"])
    assert rc == 2
    assert "Error: nonsense: cannot reach the Dask scheduler" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


_KILLED_BUILD = """
import os, signal, sys
from flowgauge.splits import build_split
def hard_kill_after_first_chunk(p):
    if p.solved >= 5:
        os.kill(os.getpid(), signal.SIGKILL)  # no cleanup, no exception handlers
build_split("ieee14", "train", samples=20, seed=1001, out=sys.argv[1], chunk=5,
            progress=hard_kill_after_first_chunk)
"""


def test_hard_killed_build_resumes_and_matches_the_frozen_split(tmp_path):
    import subprocess
    import sys
    frozen = load_split("ieee14", "train")  # frozen with seed 1001 (tools/freeze_splits.py)
    out = tmp_path / "train"
    proc = subprocess.run([sys.executable, "-c", _KILLED_BUILD, str(out)], capture_output=True, timeout=120)
    assert proc.returncode == -9
    assert not out.exists()
    assert len(list((partial_dir(out) / "chunks").glob("*.npz"))) == 1
    build_split("ieee14", "train", samples=20, seed=1001, out=out, chunk=5)
    s = load_split(out)
    # the same seed gives the same draws whatever the sample count and chunking
    np.testing.assert_array_equal(s.pd_mw, frozen.pd_mw[:20])
    np.testing.assert_array_equal(s.qd_mvar, frozen.qd_mvar[:20])
    np.testing.assert_allclose(s.references.objective, frozen.references.objective[:20], rtol=1e-6)


def test_splits_of_one_seed_share_no_draw(tmp_path):
    # the split name and design enter the seed derivation: train and test-id built with the same
    # seed (same spanning design) have no loading in common
    a = build_split("ieee14", "train", samples=4, seed=7, out=tmp_path / "a" / "train", chunk=4)
    b = build_split("ieee14", "test-id", samples=4, seed=7, out=tmp_path / "b" / "test-id", chunk=4)
    assert a["seed_rule"] == b["seed_rule"] == "split-design-slot-attempt"
    pa_, pb = load_split(tmp_path / "a" / "train").pd_mw, load_split(tmp_path / "b" / "test-id").pd_mw
    assert not any(np.allclose(x, y) for x in pa_ for y in pb)
