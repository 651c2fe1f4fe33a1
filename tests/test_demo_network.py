"""The bundled fictional demo network (Tarrowmere island): design properties, checked with the
reference library PYPOWER (its AC-OPF ``runopf`` and power flow ``runpf``)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from flowgauge.network import BUS_REF, load_network, to_ppc

pypower_api = pytest.importorskip("pypower.api")
from pypower.idx_brch import PF, PT, QF, QT  # noqa: E402
from pypower.idx_bus import VM  # noqa: E402
from pypower.idx_gen import PG  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
TOOL = ROOT / "tools" / "make_demo_network.py"
QUIET = pypower_api.ppoption(VERBOSE=0, OUT_ALL=0)


@pytest.fixture(scope="module")
def demo():
    return load_network("demo")


def _runopf(net, factor):
    return pypower_api.runopf(to_ppc(net, net.pd_mw * factor, net.qd_mvar * factor), QUIET)


def _loading(net, result):
    """Branch apparent power at the heavier end over the rating, from PYPOWER's branch flows."""
    br = result["branch"]
    s = np.maximum(np.hypot(br[:, PF], br[:, QF]), np.hypot(br[:, PT], br[:, QT]))
    return s / net.rate_mva


def test_demo_is_a_fictional_mid_size_network(demo):
    # the design brief of the demo network (issue 2): 20-40 buses, fictional, one island
    assert 20 <= demo.n_bus <= 40
    assert demo.provenance["source"] == "fictional network designed for flowgauge; not a real system"
    assert demo.provenance["generated_by"] == "tools/make_demo_network.py"
    assert len(demo.provenance["scenario"]) > 200
    assert set(demo.provenance["bus_names"]) == {str(b) for b in demo.bus_id}
    assert np.count_nonzero(demo.bus_type == BUS_REF) == 1
    # common practice: every branch of an operated network has a thermal rating
    assert np.all(np.isfinite(demo.rate_mva)) and np.all(demo.rate_mva > 0)
    assert demo.has_costs


def test_demo_has_two_voltage_levels_joined_by_tapped_transformers(demo):
    # common practice: a branch between buses of different base voltage is a transformer
    kv_from = demo.base_kv[demo.f_idx]
    kv_to = demo.base_kv[demo.t_idx]
    transformer = kv_from != kv_to
    assert set(np.unique(demo.base_kv)) == {33.0, 132.0}
    assert np.count_nonzero(transformer) >= 2
    # an off-nominal tap ratio sits on a branch between the two voltage levels
    assert np.any(transformer & (demo.tap != 1.0))
    # common practice: lines have no tap; only transformers do
    assert np.all(demo.tap[~transformer] == 1.0)


def test_demo_generators_have_clearly_different_quadratic_costs(demo):
    # marginal cost of a quadratic cost curve at full output: c1 + 2 c2 Pmax (common practice)
    marginal_at_full = demo.cost_c1 + 2.0 * demo.cost_c2 * demo.pmax_mw  # [$/MWh]
    assert marginal_at_full.max() / marginal_at_full.min() > 10.0
    assert np.count_nonzero(demo.cost_c2 > 0) >= 5


def test_demo_loads_have_different_power_factors(demo):
    # power factor P / |S| (common practice); industrial loads below 0.85, towns above 0.95
    pf = demo.pd_mw / np.hypot(demo.pd_mw, demo.qd_mvar)
    assert np.unique(np.round(pf, 2)).size >= 5
    assert pf.min() < 0.85 and pf.max() > 0.95


def test_demo_base_case_power_flow_converges_within_limits(demo):
    # reference: PYPOWER runpf on the base case (generators at pg_mw, vg_pu)
    result, success = pypower_api.runpf(to_ppc(demo), QUIET)
    assert success == 1
    vm = result["bus"][:, VM]
    assert np.all((vm >= demo.vmin_pu) & (vm <= demo.vmax_pu))
    assert np.max(_loading(demo, result)) < 1.0
    ref_pg = result["gen"][demo.bus_type[demo.gen_bus_idx] == BUS_REF, PG]
    assert np.all(ref_pg <= demo.pmax_mw[demo.bus_type[demo.gen_bus_idx] == BUS_REF])


@pytest.mark.parametrize("factor", [0.7, 1.0, 1.15, 1.2])
def test_demo_opf_is_feasible_from_low_to_high_load(demo, factor):
    # reference: PYPOWER runopf with every load scaled by the same factor
    result = _runopf(demo, factor)
    assert result["success"]
    assert np.max(_loading(demo, result)) <= 1.0 + 1e-4
    vm = result["bus"][:, VM]
    assert np.all(vm >= demo.vmin_pu - 1e-6) and np.all(vm <= demo.vmax_pu + 1e-6)


def test_demo_thermal_limit_binds_at_high_load_only(demo):
    # reference: PYPOWER runopf; branch flows against rate_mva
    assert np.max(_loading(demo, _runopf(demo, 1.0))) < 0.95
    loading = _loading(demo, _runopf(demo, 1.15))
    binding = np.flatnonzero(loading > 0.999)
    assert binding.size >= 1
    # the binding limit is the northern hydro corridor (both circuits of buses 1-2)
    assert set(zip(demo.from_bus[binding].tolist(), demo.to_bus[binding].tolist())) == {(1, 2)}


def test_demo_opf_fails_well_beyond_its_loadability(demo):
    # reference: PYPOWER runopf finds no feasible point at 1.6x base load, so the maximum
    # loadability along a uniform increase lies between 1.2x and 1.6x
    assert not _runopf(demo, 1.6)["success"]


def test_demo_file_is_what_the_generator_tool_writes(tmp_path):
    spec = importlib.util.spec_from_file_location("make_demo_network", TOOL)
    tool = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tool)
    out = tmp_path / "demo.json"
    assert tool.main(["make_demo_network.py", str(out)]) == 0
    bundled = ROOT / "src" / "flowgauge" / "network" / "data" / "demo.json"
    assert out.read_bytes() == bundled.read_bytes()
