"""How samples are split into Newton batches is an execution detail: the same numbers, to the
bit, whatever the batch size (property: samples are independent, docs/powerflow.md), and the
level grouping of the stacked LU's schedule equals NumPy's own selection."""

from __future__ import annotations

import numpy as np
import pytest

import flowgauge.powerflow._ac as ac
from flowgauge.network import load_network
from flowgauge.powerflow import solve_powerflow_batch
from flowgauge.powerflow._stacked_lu import _groups

_FIELDS = ("converged", "iterations", "vm_pu", "va_deg", "pg_mw", "qg_mvar", "sf_mva", "st_mva")


def _inputs(net, n, seed):
    rng = np.random.default_rng(seed)
    scale = rng.uniform(0.8, 1.2, (n, net.n_load))
    pg = net.pg_mw * rng.uniform(0.9, 1.1, (n, net.n_gen))
    return net.pd_mw * scale, net.qd_mvar * scale, pg


@pytest.mark.parametrize("enforce", [False, True])
def test_batch_size_does_not_change_results(monkeypatch, enforce):
    net = load_network("ieee118")
    pd, qd, pg = _inputs(net, 23, 5)
    whole = solve_powerflow_batch(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, init="dc", enforce_q_limits=enforce)
    if enforce:  # the inputs must exercise the switching rounds
        assert (whole.at_q_limit != 0).any()
    # about 5 samples per Newton batch: 23 samples in 5 batches of 4 or 5 (uneven pieces)
    p = ac.prepared(net)
    pat = p.pattern(p.pv, p.pq)
    monkeypatch.setattr(ac, "BATCH_ENTRIES", 5 * max(ac.stacked_lu(pat).nnz, 4 * pat.nnz))
    calls = []
    newton = ac.newton
    monkeypatch.setattr(ac, "newton", lambda *a, **k: calls.append(a[2].shape[0]) or newton(*a, **k))
    split = solve_powerflow_batch(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, init="dc", enforce_q_limits=enforce)
    assert max(calls) < pd.shape[0] and len(set(calls)) > 1, calls  # really split, unevenly
    for k in _FIELDS:
        np.testing.assert_array_equal(getattr(split, k), getattr(whole, k), err_msg=k)
    if enforce:
        np.testing.assert_array_equal(split.at_q_limit, whole.at_q_limit)


def test_groups_match_numpy_selection():
    rng = np.random.default_rng(2)
    key = rng.integers(0, 9, 500)
    got = _groups(key, 9)
    for g in range(9):
        np.testing.assert_array_equal(got[g], np.flatnonzero(key == g))  # source: NumPy's flatnonzero
    assert sum(x.size for x in got) == key.size
