"""The synthetic network generator: connectivity (scipy csgraph), determinism, and solvability
checked with the reference library PYPOWER (power flow ``runpf``, AC-OPF ``runopf``)."""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.sparse import csgraph

from flowgauge._io import canonical_json
from flowgauge.errors import InputError
from flowgauge.network import BUS_REF, Network, network_from_dict, network_to_dict, synthetic, to_ppc

pypower_api = pytest.importorskip("pypower.api")
from pypower.idx_brch import PF, PT, QF, QT  # noqa: E402
from pypower.idx_bus import VM  # noqa: E402

QUIET = pypower_api.ppoption(VERBOSE=0, OUT_ALL=0)


def _n_components(net: Network) -> int:
    adj = sp.coo_matrix((np.ones(net.n_branch), (net.f_idx, net.t_idx)), shape=(net.n_bus, net.n_bus))
    return csgraph.connected_components(adj, directed=False)[0]


def _loading(net: Network, result: dict) -> np.ndarray:
    br = result["branch"]
    s = np.maximum(np.hypot(br[:, PF], br[:, QF]), np.hypot(br[:, PT], br[:, QT]))
    return s / net.rate_mva


@settings(max_examples=6, deadline=None)
@given(n_bus=st.integers(50, 160), seed=st.integers(0, 2**32 - 1))
def test_synthetic_networks_are_connected_and_pass_the_load_checks(n_bus, seed):
    net = synthetic(n_bus, seed)
    assert net.n_bus == n_bus
    # reference: scipy.sparse.csgraph connected components of the branch graph
    assert _n_components(net) == 1
    # a round trip through our file format runs the checks made on every loaded network
    back = network_from_dict(json.loads(canonical_json(network_to_dict(net))), source="synthetic")
    assert back.n_branch == net.n_branch
    assert np.count_nonzero(net.bus_type == BUS_REF) == 1
    assert np.all(net.x_pu > 0) and np.all(net.rate_mva > 0)
    assert np.all(net.pmin_mw <= net.pg_mw) and np.all(net.pg_mw <= net.pmax_mw)
    # common practice: generating capacity with a reserve above the load
    assert net.pmax_mw.sum() > 1.2 * net.total_load_mw()


def test_same_seed_gives_identical_arrays_and_another_seed_does_not():
    a, b, c = synthetic(120, 7), synthetic(120, 7), synthetic(120, 8)
    for name in Network.array_fields():
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    assert canonical_json(network_to_dict(a)) == canonical_json(network_to_dict(b))
    assert not np.array_equal(a.x_pu[:10], c.x_pu[:10])
    assert not np.array_equal(a.pd_mw[:10], c.pd_mw[:10])


def test_synthetic_topology_and_impedances_look_like_a_transmission_grid():
    net = synthetic(2000, 3)
    # common practice: real transmission grids have an average bus degree of about 2.5-3
    assert 2.5 <= 2 * net.n_branch / net.n_bus <= 3.0
    # common practice: overhead transmission lines have x/r between about 5 and 15, large
    # transformers 20 or more; transmission and sub-transmission levels such as 345 and 138 kV
    line = net.base_kv[net.f_idx] == net.base_kv[net.t_idx]
    x_over_r = net.x_pu / net.r_pu
    assert np.all((x_over_r[line] >= 5) & (x_over_r[line] <= 15))
    assert np.all(x_over_r[~line] >= 20)
    assert set(np.unique(net.base_kv)) == {345.0, 138.0}
    assert np.any(net.tap[~line] != 1.0) and np.all(net.tap[line] == 1.0)
    # one generator per 4-6 buses and loads at most buses (common practice for test systems)
    assert 0.15 <= net.n_gen / net.n_bus <= 0.25
    assert 0.6 <= net.n_load / net.n_bus <= 0.9


def test_largest_synthetic_network_is_connected():
    net = synthetic(10_000, 0)
    assert net.n_bus == 10_000
    assert _n_components(net) == 1  # reference: scipy.sparse.csgraph


@pytest.mark.parametrize("n_bus", [50, 200, 1000])
def test_base_case_is_solved_by_pypower_power_flow(n_bus):
    net = synthetic(n_bus, 11)
    # reference: PYPOWER runpf (Newton-Raphson) on the base case, generators at pg_mw and vg_pu
    result, success = pypower_api.runpf(to_ppc(net), QUIET)
    assert success == 1
    vm = result["bus"][:, VM]
    assert np.all((vm >= net.vmin_pu) & (vm <= net.vmax_pu))
    assert np.max(_loading(net, result)) < 1.0


@pytest.mark.parametrize("n_bus", [50, 200])
def test_base_load_ac_opf_is_feasible(n_bus):
    net = synthetic(n_bus, 5)
    # reference: PYPOWER runopf at base load
    result = pypower_api.runopf(to_ppc(net), QUIET)
    assert result["success"]
    assert np.max(_loading(net, result)) <= 1.0 + 1e-4


@pytest.mark.parametrize("bad", [49, 10_001, 0, -5, 50.0, "100", True, None])
def test_bad_sizes_are_rejected_with_one_clear_message(bad):
    with pytest.raises(InputError, match=r"n_bus must be an integer from 50 to 10000, got "):
        synthetic(bad, 0)


@pytest.mark.parametrize("bad", [-1, 1.5, "3", None])
def test_bad_seeds_are_rejected(bad):
    with pytest.raises(InputError, match=r"seed must be a non-negative integer, got "):
        synthetic(60, bad)
