"""Baselines: each writes a valid predictions file, and the scores move in the expected
directions (not tuned values)."""

import numpy as np
import pytest

from flowgauge.baselines import predict_baseline, write_baseline
from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.scoring import score
from flowgauge.submission import check_predictions

from test_scoring_support import split, split_path


@pytest.fixture(scope="module")
def splits():
    split_path("ieee14", "train")  # the learned baselines find it as the sibling folder
    return {name: split("ieee14", name) for name in ("test-id", "test-ood")}


@pytest.mark.parametrize("name", ["nearest", "linear"])
def test_learned_baselines_do_worse_out_of_distribution(name, splits, tmp_path):
    a = {}
    for s, sp in splits.items():
        path = write_baseline(name, sp, tmp_path / f"{s}.json")
        check_predictions(path, sp)  # a valid predictions file
        a[s] = score(path, sp).aggregates
    # Common practice: a proxy fitted on in-distribution loads fails more often, and breaks the
    # power balance more, on loadings outside its training distribution.
    assert a["test-ood"]["restoration_failure_rate"] > a["test-id"]["restoration_failure_rate"]
    assert a["test-ood"]["violations"]["raw_balance_mw"]["mean"] > a["test-id"]["violations"]["raw_balance_mw"]["mean"]


def test_nearest_returns_the_nearest_training_reference(splits):
    train = split("ieee14", "train")
    sp = splits["test-id"]
    pred = predict_baseline("nearest", sp, train=split_path("ieee14", "train"))
    # brute force over the training samples (independent of the k-d tree)
    x_train = np.hstack([train.pd_mw, train.qd_mvar])
    x = np.hstack([sp.pd_mw, sp.qd_mvar])
    nearest = np.argmin(((x[:, None, :] - x_train[None]) ** 2).sum(axis=2), axis=1)
    np.testing.assert_array_equal(pred.pg_mw, train.references.pg_mw[nearest])
    np.testing.assert_array_equal(pred.va_deg, train.references.va_deg[nearest])


def test_linear_recovers_an_exactly_affine_map():
    # Constructed case: targets are a known affine map of the loads; ridge regression with a
    # vanishing penalty must predict new loads through that same map (hand-set coefficients).
    from types import SimpleNamespace

    from flowgauge.baselines._models import linear
    rng = np.random.default_rng(0)
    pd_train, qd_train = rng.uniform(10, 20, (50, 2)), rng.uniform(1, 5, (50, 2))
    w = np.array([[1.0, -2.0], [0.5, 0.0], [0.0, 3.0], [2.0, 1.0]])  # 4 load features -> 2 outputs

    def truth(pd, qd):
        return np.hstack([pd, qd]) @ w + np.array([7.0, -1.0])

    y = truth(pd_train, qd_train)
    refs = SimpleNamespace(pg_mw=y, vm_pu=y[:, :1] * 0 + 1.0, va_deg=y[:, 1:], qg_mvar=y[:, :1])
    train = SimpleNamespace(pd_mw=pd_train, qd_mvar=qd_train, references=refs)
    pd_new, qd_new = np.array([[12.0, 18.0]]), np.array([[2.0, 4.0]])
    pred = linear(train, pd_new, qd_new, alpha=1e-10)
    # by hand: [12, 18, 2, 4] @ w + [7, -1] = [12 + 9 + 0 + 8 + 7, -24 + 0 + 6 + 4 - 1] = [36, -15]
    np.testing.assert_allclose(pred.pg_mw, [[36.0, -15.0]], atol=1e-6)
    np.testing.assert_allclose(pred.vm_pu, [[1.0]], atol=1e-9)


def test_dc_opf_gap_is_positive(splits, tmp_path):
    sp = splits["test-id"]
    path = write_baseline("dc-opf", sp, tmp_path / "dc.json")
    a = score(path, sp).aggregates
    # Common practice: the DC-OPF dispatch ignores losses and reactive power, so once an AC power
    # flow restores it, it costs more than the AC optimum (around a percent on test systems).
    assert a["restored_gap_pct"]["mean"] > 0
    assert a["restored_gap_pct"]["median"] > 0


def test_baseline_command(splits, tmp_path, capsys):
    out = tmp_path / "lin.parquet"
    rc = main(["baseline", "linear", "--split", str(split_path("ieee14", "test-id")), "--out", str(out),
               "--format", "parquet"])
    assert rc == 0 and out.exists()
    assert "wrote" in capsys.readouterr().out
    test_id = str(split_path("ieee14", "test-id"))
    rc = main(["baseline", "oracle", "--split", test_id, "--out", str(tmp_path / "x.json")])
    assert rc == 2
    assert ("The 'name' parameter must be one of ['dc-opf', 'linear', 'nearest']. Got 'oracle' instead."
            in capsys.readouterr().err)
    assert not (tmp_path / "x.json").exists()
    blocker = tmp_path / "a-file"
    blocker.write_text("")
    rc = main(["baseline", "nearest", "--split", test_id, "--out", str(blocker / "x.json")])
    assert rc == 2 and "a-file/x.json: cannot write here" in capsys.readouterr().err


def test_missing_train_split(tmp_path, monkeypatch):
    from flowgauge.splits import build_split
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(tmp_path / "no-frozen-splits"))
    lone = tmp_path / "ieee14" / "test-id"
    build_split("ieee14", "test-id", samples=2, seed=9, out=lone)
    with pytest.raises(InputError, match="no frozen split ieee14/train"):
        predict_baseline("nearest", lone)


def test_dc_opf_prediction_shape_and_setpoints(splits):
    sp = splits["test-id"]
    pred = predict_baseline("dc-opf", sp)
    # Voltage setpoints of the IEEE 14-bus case's generator buses 1, 2, 3, 6, 8 (PYPOWER case14 gen VG):
    # 1.06, 1.045, 1.01, 1.07, 1.09 p.u., held within the case's bus limits [0.94, 1.06] (PYPOWER
    # case14 VMIN/VMAX): 1.06, 1.045, 1.01, 1.06, 1.06 p.u.
    np.testing.assert_allclose(pred.vm_pu[:, [0, 1, 2, 5, 7]], np.tile([1.06, 1.045, 1.01, 1.06, 1.06], (20, 1)))
    # The DC power flow is lossless (common practice): generation equals load in every sample.
    np.testing.assert_allclose(pred.pg_mw.sum(axis=1), sp.pd_mw.sum(axis=1), rtol=1e-6)
    assert pred.va_deg is None and pred.qg_mvar is None


def test_dc_opf_baseline_falls_back_where_the_dc_model_is_infeasible():
    from flowgauge.baselines import dc_opf
    from flowgauge.network import load_network
    net = load_network("demo")
    # 19 MW of load against 20 MW of summed minimum outputs (demo's two must-run units): the
    # lossless DC balance has no solution, so every generator sits at its minimum (hand check:
    # the closest dispatch the limits allow)
    pd = net.pd_mw * (19.0 / net.pd_mw.sum())
    pred = dc_opf(net, pd[None, :], np.array([0]))
    np.testing.assert_allclose(pred.pg_mw[0], net.pmin_mw)
    assert net.pmin_mw.sum() == pytest.approx(20.0)


def test_linear_outputs_stay_within_the_limits_far_outside_training():
    from flowgauge.baselines._models import linear
    from flowgauge.splits import load_split
    train = load_split("ieee14", "train")
    net = train.network
    # five times the heaviest training loading: a linear map extrapolates far past every limit
    big = train.pd_mw[np.argmax(train.pd_mw.sum(axis=1))] * 5.0
    pred = linear(train, big[None, :], (net.qd_mvar * 5.0)[None, :])
    assert np.all(pred.vm_pu >= net.vmin_pu) and np.all(pred.vm_pu <= net.vmax_pu)
    assert np.all(pred.pg_mw >= net.pmin_mw) and np.all(pred.pg_mw <= net.pmax_mw)
    assert np.all(np.abs(pred.va_deg) <= 180.0)


# ---- splits with network states (tests/test_scoring_state.py: ieee14, rows 0-3 branch 0 out,
# rows 4-7 generator 1 out, rows 8-11 intact) ------------------------------------------------

def test_dc_opf_follows_each_samples_state_as_pypower_rundcopf_without_the_element():
    import warnings

    from pypower.api import ppoption, rundcopf

    from flowgauge.network import to_ppc
    from flowgauge.splits import load_split
    from test_scoring_state import state_split_path
    sp = load_split(state_split_path())
    pred = predict_baseline("dc-opf", sp)
    net = sp.network
    for row, table, pos in ((0, "branch", 0), (4, "generator", 1), (8, None, None)):
        ppc = to_ppc(net, sp.pd_mw[row], sp.qd_mvar[row])
        keep = np.arange(net.n_gen)
        if table == "branch":
            ppc["branch"] = np.delete(ppc["branch"], pos, axis=0)
        elif table == "generator":
            ppc["gen"] = np.delete(ppc["gen"], pos, axis=0)
            ppc["gencost"] = np.delete(ppc["gencost"], pos, axis=0)
            keep = np.delete(keep, pos)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = rundcopf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
        assert ref["success"]
        # reference library: PYPOWER rundcopf on the case with the element's row deleted;
        # both are interior-point solutions: measured differences up to 2e-6 MW, checked to 1e-5
        np.testing.assert_allclose(pred.pg_mw[row][keep], ref["gen"][:, 1], atol=1e-5)
        if table == "generator":  # hand: a generator out is dispatched at 0
            assert pred.pg_mw[row][pos] == 0.0


@pytest.mark.parametrize("name", ["nearest", "linear"])
def test_learned_baselines_ignore_the_state(name):
    from flowgauge.baselines import linear, nearest
    from flowgauge.splits import load_split
    from test_scoring_state import state_split_path
    sp = load_split(state_split_path())
    train = split_path("ieee14", "train")
    got = predict_baseline(name, sp, train=train)
    # the same loads without any state give the same predictions: the state is not an input
    want = {"nearest": nearest, "linear": linear}[name](load_split(train), sp.pd_mw, sp.qd_mvar)
    np.testing.assert_array_equal(got.pg_mw, want.pg_mw)
    np.testing.assert_array_equal(got.vm_pu, want.vm_pu)
