"""AC and DC power flow of the bundled IEEE systems checked against reference libraries run on
the same source data: PYPOWER 5.1.21 (runpf, rundcpf) and pandapower (runpp with reactive
limits)."""

from __future__ import annotations

import logging
import warnings

import numpy as np
import pytest
from pypower.idx_brch import PF, PT, QF, QT
from pypower.idx_bus import VA, VM
from pypower.idx_gen import PG, QG

from flowgauge.network import load_network, to_ppc
from flowgauge.powerflow import solve_dc_powerflow, solve_powerflow

from test_powerflow_support import pypower_ac, pypower_dc


@pytest.mark.parametrize("name", ["ieee30", "ieee57", "ieee118", "ieee300"])
def test_ac_base_case_matches_pypower_runpf(name):
    net = load_network(name)
    res = pypower_ac(net)  # source: PYPOWER runpf on the same case data
    r = solve_powerflow(net)
    assert r.converged and r.status == "converged"
    assert r.max_mismatch_pu < 1e-8
    np.testing.assert_allclose(r.vm_pu, res["bus"][:, VM], atol=1e-6)
    np.testing.assert_allclose(r.va_deg, res["bus"][:, VA], atol=1e-5)
    br = res["branch"]
    np.testing.assert_allclose(r.pf_mw, br[:, PF], atol=1e-4)
    np.testing.assert_allclose(r.qf_mvar, br[:, QF], atol=1e-4)
    np.testing.assert_allclose(r.pt_mw, br[:, PT], atol=1e-4)
    np.testing.assert_allclose(r.qt_mvar, br[:, QT], atol=1e-4)
    np.testing.assert_allclose(r.sf_mva, np.hypot(br[:, PF], br[:, QF]), atol=1e-4)
    # reference-bus active output and every generator's reactive output
    np.testing.assert_allclose(r.pg_mw, res["gen"][:, PG], atol=1e-4)
    np.testing.assert_allclose(r.qg_mvar, res["gen"][:, QG], atol=1e-4)


@pytest.mark.parametrize("init", ["flat", "dc"])
def test_ieee118_iterations_and_reference_angle(init):
    # ieee118's reference bus (69) sits at 30 degrees in the published case data (source: PYPOWER case118)
    net = load_network("ieee118")
    r = solve_powerflow(net, init=init)
    ref = int(np.flatnonzero(net.bus_id == 69)[0])
    assert r.va_deg[ref] == pytest.approx(30.0, abs=1e-12)
    assert r.iterations <= 5  # Newton-Raphson converges quadratically here (common practice: 3-5 steps)


@pytest.mark.parametrize("name", ["ieee30", "ieee118", "ieee300"])
def test_dc_power_flow_matches_pypower_rundcpf(name):
    net = load_network(name)
    res = pypower_dc(net)  # source: PYPOWER rundcpf
    d = solve_dc_powerflow(net)
    np.testing.assert_allclose(d.va_deg, res["bus"][:, VA], atol=1e-8)
    np.testing.assert_allclose(d.pf_mw, res["branch"][:, PF], atol=1e-7)
    np.testing.assert_allclose(d.pg_mw, res["gen"][:, PG], atol=1e-7)
    ref_gen = np.flatnonzero(np.isin(net.gen_bus_idx, net.ref_idx))
    assert d.p_ref_mw[0] == pytest.approx(res["gen"][ref_gen, PG].sum(), abs=1e-7)
    # stacked input: two samples, the second with all loads doubled
    pd = np.stack([net.pd_mw, 2 * net.pd_mw])
    ds = solve_dc_powerflow(net, pd_mw=pd)
    assert ds.va_deg.shape == (2, net.n_bus)
    np.testing.assert_allclose(ds.pf_mw[0], res["branch"][:, PF], atol=1e-7)
    assert ds.p_ref_mw[1, 0] - ds.p_ref_mw[0, 0] == pytest.approx(net.pd_mw.sum(), rel=1e-12)


def test_reactive_limits_match_pandapower():
    pp = pytest.importorskip("pandapower")
    from pandapower.converter.pypower import from_ppc
    net = load_network("ieee118")
    free = solve_powerflow(net)
    over = (free.qg_mvar > net.qmax_mvar + 1e-6) | (free.qg_mvar < net.qmin_mvar - 1e-6)
    assert over.sum() >= 1  # the base case breaks some limits, so the test exercises conversion
    r = solve_powerflow(net, enforce_q_limits=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        logging.disable(logging.WARNING)
        try:
            pn = from_ppc(to_ppc(net), f_hz=60, validate_conversion=False)
            # source: pandapower runpp with its reactive-limit enforcement, same case data
            pp.runpp(pn, enforce_q_lims=True, tolerance_mva=1e-8, calculate_voltage_angles=True, init="dc")
        finally:
            logging.disable(logging.NOTSET)
    assert r.converged
    np.testing.assert_allclose(r.vm_pu, pn.res_bus.vm_pu.values, atol=1e-6)
    np.testing.assert_allclose(r.va_deg, pn.res_bus.va_degree.values, atol=1e-5)
    pv_gen = np.isin(net.gen_bus_idx, net.pv_idx)
    assert np.all(r.qg_mvar[pv_gen] <= net.qmax_mvar[pv_gen] + 1e-6)
    assert np.all(r.qg_mvar[pv_gen] >= net.qmin_mvar[pv_gen] - 1e-6)
