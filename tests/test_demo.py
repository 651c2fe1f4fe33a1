"""``flowgauge demo``: builds small splits when no frozen ones exist, runs every baseline on
every test split and on the maintenance scenario (a line out), scores them and prints the
comparison."""

import warnings

import numpy as np
import pytest

from flowgauge.cli import main


def test_demo_builds_small_splits_and_compares(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(tmp_path / "no-frozen-splits"))
    work = tmp_path / "work"
    rc = main(["demo", "--workdir", str(work), "--samples", "8"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert "no frozen split demo/train: building one with 8 samples" in err
    assert "built splits" in out
    for baseline in ("dc-opf", "nearest", "linear"):
        for split in ("test-id", "test-ood", "test-edge"):
            assert (work / "predictions" / f"{baseline}.{split}.json").exists()
    rows = [line for line in out.splitlines() if "test-" in line or "line-out" in line]
    assert len(rows) == 12 and all(" 8 " in row for row in rows)
    assert sum("line-out" in row for row in rows) == 3
    assert "line-out: the first 8 demo/test-id samples, Orvanne corridor circuit 2 out" in err
    assert max(len(line) for line in out.splitlines()) <= 80  # fits a default terminal
    for baseline in ("dc-opf", "nearest", "linear"):
        assert (work / "predictions" / f"{baseline}.line-out.json").exists()
    _check_maintenance_split(work / "demo" / "line-out", work / "demo" / "test-id")


def _check_maintenance_split(folder, test_id):
    """The maintenance split: the test-id loadings with branch id 2 (bus 1 - bus 2, docs/networks.md)
    out in every sample; its references against PYPOWER runopf on the case without that branch."""
    from pypower.api import ppoption, runopf

    from flowgauge.network import to_ppc
    from flowgauge.splits import load_split
    sp, src = load_split(folder), load_split(test_id)
    net = sp.network
    assert sp.has_states and sp.n_samples >= 6  # at most 2 of 8 loadings lack a solution without it
    pos = int(np.flatnonzero(net.branch_id == 2)[0])
    # network data: branch id 2 joins bus 1 and bus 2
    assert (net.bus_id[net.f_idx[pos]], net.bus_id[net.t_idx[pos]]) == (1, 2)
    assert not sp.branch_in_service[:, pos].any() and sp.branch_in_service.sum() == sp.n_samples * 33
    assert sp.gen_in_service.all()
    ppc = to_ppc(net, sp.pd_mw[0], sp.qd_mvar[0])
    ppc["branch"] = np.delete(ppc["branch"], pos, axis=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = runopf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
    assert ref["success"]
    # reference library: PYPOWER runopf on the case with the circuit's row deleted
    assert sp.references.objective[0] == pytest.approx(ref["f"], rel=1e-6)
    # the loadings are test-id's (taken in order, those without a solution skipped)
    assert np.isin(sp.pd_mw[:, 0], src.pd_mw[:, 0]).all()


def test_demo_rejects_bad_sample_count(capsys):
    assert main(["demo", "--samples", "1"]) == 2
    assert "Invalid value for '--samples': 1 is not in the range x>=2." in capsys.readouterr().err


def test_run_demo_checks_samples(tmp_path):
    from flowgauge.baselines import run_demo
    from flowgauge.errors import InputError
    with pytest.raises(InputError, match="expected an integer >= 2, got 0"):
        run_demo(tmp_path, samples=0)
