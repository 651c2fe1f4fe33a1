"""Split storage, manifests and sampling designs: no solver needed."""

import json

import networkx as nx
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from flowgauge.errors import InputError
from flowgauge.network import load_network
from flowgauge.splits import Edge, LevelLocal, Shifted, load_split
from flowgauge.splits._designs import Loading, sample_rng
from flowgauge.splits._graph import two_regions
from flowgauge.splits._manifest import check_schema
from flowgauge.splits._store import (columns_hash, inputs_from_table, inputs_table, references_table,
                                     round_array)


def _refs(rng, s, n_gen, n_bus):
    return {"pg_mw": rng.normal(size=(s, n_gen)), "qg_mvar": rng.normal(size=(s, n_gen)),
            "vm_pu": rng.uniform(0.9, 1.1, (s, n_bus)), "va_deg": rng.normal(size=(s, n_bus)),
            "objective_per_h": rng.uniform(1e3, 1e4, s), "max_p_mismatch_mw": np.zeros(s),
            "max_q_mismatch_mvar": np.zeros(s), "max_limit_violation": np.zeros(s),
            "solve_seconds": rng.uniform(0, 1, s), "margin": np.full(s, np.nan),
            "status": ["converged"] * s, "iterations": np.arange(s),
            "binding": [("bus:1:vmax",), ()] * (s // 2), "signature": ["a", ""] * (s // 2)}


def test_inputs_round_trip_through_an_independent_reader(tmp_path, rng):
    pd_mw, qd_mvar = rng.uniform(0, 100, (6, 4)), rng.uniform(-10, 10, (6, 4))
    path = tmp_path / "inputs.parquet"
    pq.write_table(inputs_table(np.arange(6), pd_mw, qd_mvar), path)
    # reference reader: pandas reads the fixed-size lists as one array per row
    df = pd.read_parquet(path)
    assert list(df.columns) == ["sample_id", "pd_mw", "qd_mvar"]
    np.testing.assert_allclose(np.stack(df["pd_mw"].to_numpy()), pd_mw, rtol=1e-9)
    assert pq.read_schema(path).field("pd_mw").type == pa.list_(pa.float64(), 4)
    sid, back_pd, _ = inputs_from_table(pq.read_table(path), path)
    np.testing.assert_array_equal(sid, np.arange(6))
    np.testing.assert_array_equal(back_pd, round_array(pd_mw))


def test_content_hash_ignores_parquet_bytes_but_sees_one_value(tmp_path, rng):
    table = references_table(np.arange(4), _refs(rng, 4, 3, 5))
    pq.write_table(table, tmp_path / "a.parquet", compression="zstd")
    pq.write_table(table, tmp_path / "b.parquet", compression="none", write_statistics=False)
    a, b = (tmp_path / "a.parquet").read_bytes(), (tmp_path / "b.parquet").read_bytes()
    assert a != b
    ha = columns_hash(pq.read_table(tmp_path / "a.parquet"))
    assert ha == columns_hash(pq.read_table(tmp_path / "b.parquet"))
    cols = _refs(np.random.default_rng(1), 4, 3, 5)
    cols2 = {k: (np.array(v, copy=True) if isinstance(v, np.ndarray) else v) for k, v in cols.items()}
    cols2["pg_mw"][2, 1] += 1e-6
    assert columns_hash(references_table(np.arange(4), cols)) != columns_hash(references_table(np.arange(4), cols2))


def test_round_array_keeps_ten_significant_digits():
    # hand calculation: 123.456789012345 to 10 significant digits is 123.456789
    x = np.array([123.456789012345, -0.000123456789012345, 0.0, np.nan])
    out = round_array(x)
    assert out[0] == 123.456789
    assert out[1] == -0.0001234567890
    assert out[2] == 0.0 and np.isnan(out[3])


def test_manifest_schema_names_the_bad_field():
    with pytest.raises(InputError, match=r"m.json: /: manifest does not follow its schema: 'format_version' is a required property"):
        check_schema({"format": "other"}, "m.json")


def test_margin_nulls_outside_edge_split(rng):
    table = references_table(np.arange(2), _refs(rng, 2, 1, 2))
    assert table.column("margin").null_count == 2


def test_level_local_keeps_power_factor_and_ranges():
    net = load_network("ieee14")
    d = LevelLocal()
    draws = [d.draw(net, sample_rng(5, i, 0)) for i in range(200)]
    ratio = np.stack([x.pd_mw / net.pd_mw for x in draws])
    # design definition: level in [0.85, 1.15] times local factor in [0.95, 1.05]
    assert ratio.min() >= 0.85 * 0.95 and ratio.max() <= 1.15 * 1.05
    # power factor kept: Q/P of every load equals the base case's
    for x in draws[:20]:
        np.testing.assert_allclose(x.qd_mvar * net.pd_mw, net.qd_mvar * x.pd_mw, rtol=1e-12, atol=1e-12)


def test_level_ranges_scale_down_on_networks_near_their_capacity():
    # hand arithmetic of the documented rule: top of the training range = 0.85 x capacity when
    # that is below 1.15; every range scaled by the same factor; heavy levels below 0.99 x capacity
    d = LevelLocal(capacity=1.0342)
    s = 0.85 * 1.0342 / 1.15
    np.testing.assert_allclose(d.level_used, (0.85 * s, 0.85 * 1.0342), rtol=1e-12)
    r = Shifted(capacity=1.0342).ranges()
    np.testing.assert_allclose(r["level_high"], (1.25 * s, 0.99 * 1.0342), rtol=1e-12)
    np.testing.assert_allclose(r["level_low"], (0.55 * s, 0.78 * s), rtol=1e-12)
    # a network with room to spare keeps the nominal ranges
    assert LevelLocal(capacity=1.9525).level_used == (0.85, 1.15)
    assert Shifted(capacity=1.9525).ranges()["level_high"] == (1.25, 1.40)


def test_uniform_capacity_brackets_pypower_feasibility():
    from pypower.api import ppoption, runopf

    from flowgauge.network import to_ppc
    from flowgauge.splits._designs import uniform_capacity

    net = load_network("ieee30")
    cap = uniform_capacity(net)
    opt = ppoption(VERBOSE=0, OUT_ALL=0)
    # reference: PYPOWER's runopf solves the uniformly scaled case just below the capacity and
    # finds no solution 2 % above it
    assert runopf(to_ppc(net, net.pd_mw * 0.999 * cap, net.qd_mvar * 0.999 * cap), opt)["success"]
    assert not runopf(to_ppc(net, net.pd_mw * 1.02 * cap, net.qd_mvar * 1.02 * cap), opt)["success"]


def test_draws_depend_only_on_seed_slot_and_attempt():
    net = load_network("ieee30")
    a = LevelLocal().draw(net, sample_rng(7, 3, 0)).pd_mw
    b = LevelLocal().draw(net, sample_rng(7, 3, 0)).pd_mw
    c = LevelLocal().draw(net, sample_rng(7, 3, 1)).pd_mw
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)


@pytest.mark.parametrize("capacity", [float("nan"), 1.0819])
def test_shifted_leaves_the_training_distribution(capacity):
    net = load_network("ieee57")
    d = Shifted(capacity=capacity)
    s = LevelLocal(capacity=capacity).level_used[1] / 1.15  # the common scale of every level range
    outside = 0
    has = net.pd_mw > 0
    for i in range(200):
        x = d.draw(net, sample_rng(11, i, 0))
        ratio = x.pd_mw[has] / net.pd_mw[has]
        # a level-local draw has ratio = L x f with L in [0.85, 1.15], f in [0.95, 1.05]: some L must
        # satisfy max(ratio) / 1.05 <= L <= min(ratio) / 0.95 (hand derivation from the design)
        explained = max(ratio.max() / 1.05, 0.85 * s) <= min(ratio.min() / 0.95, 1.15 * s)
        pf_changed = not np.allclose(x.qd_mvar[has] / x.pd_mw[has], net.qd_mvar[has] / net.pd_mw[has],
                                     rtol=1e-9, atol=1e-12)
        if not explained or pf_changed:
            outside += 1
    # every kind (low level, high level, regional imbalance, shifted power factor) leaves the
    # level-local support by construction
    assert outside == 200


def test_two_regions_follow_hop_distance_from_networkx():
    net = load_network("ieee118")
    mask = two_regions(net)
    g = nx.Graph()
    g.add_edges_from(zip(net.f_idx.tolist(), net.t_idx.tolist()))
    # reference: networkx BFS hop distances, poles chosen as the documented rule says
    d0 = nx.single_source_shortest_path_length(g, 0)
    far = max(d0.values())
    a = min(k for k, v in d0.items() if v == far)
    da = nx.single_source_shortest_path_length(g, a)
    far_b = max(da.values())
    b = min(k for k, v in da.items() if v == far_b)
    db = nx.single_source_shortest_path_length(g, b)
    expected = np.array([da[i] <= db[i] for i in range(net.n_bus)])
    np.testing.assert_array_equal(mask, expected)
    assert 0 < mask.sum() < net.n_bus


class _FixedLoadability:
    """A stand-in for the solver: maximum loadability 0.5 along any direction."""

    def max_loadability(self, pd, qd, dpd, dqd):
        return 0.5


def test_edge_loading_sits_at_one_minus_margin_of_lambda():
    net = load_network("ieee14")
    x = Edge().draw(net, sample_rng(1, 0, 0), _FixedLoadability())
    assert isinstance(x, Loading) and 0.002 <= x.margin <= 0.03
    step = (x.pd_mw - net.pd_mw) / (0.5 * (1 - x.margin))
    # direction is scaled to the base total load, non-negative, power factor kept
    assert step.sum() == pytest.approx(net.pd_mw.sum(), rel=1e-12)
    assert np.all(step >= 0)


def test_edge_passes_on_a_loadability_failure():
    class _Fails:
        def max_loadability(self, *a):
            return "loadability-infeasible"
    assert Edge().draw(load_network("ieee14"), sample_rng(1, 0, 0), _Fails()) == "loadability-infeasible"


def test_load_split_errors_name_what_was_expected(tmp_path, monkeypatch):
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(tmp_path))
    with pytest.raises(InputError, match=r"no frozen split ieee14/test-id"):
        load_split("ieee14", "test-id")
    with pytest.raises(InputError, match=r"expected one of train, test-id, test-ood, test-edge, .*train-local.*, got 'val'"):
        load_split("ieee14", "val")
    with pytest.raises(InputError, match=r"no split with this split_hash"):
        load_split("0" * 64)
    (tmp_path / "x").mkdir()
    with pytest.raises(InputError, match=r"not a finished split"):
        load_split(tmp_path / "x")
