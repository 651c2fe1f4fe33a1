"""Batched physics checked against PYPOWER 5.1.21 (makeYbus, dSbus_dV, makeBdc, makePTDF,
runpf) on the IEEE test systems converted from PYPOWER's own case data."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from pypower.api import dSbus_dV, makeBdc, makePTDF, makeYbus
from pypower.idx_brch import PF, PT, QF, QT
from pypower.idx_bus import VA, VM
from pypower.idx_gen import GEN_BUS, PG, QG

from flowgauge.network import load_network
from flowgauge.physics import (admittance, balance_residuals, branch_flows, bus_injections,
                               dc_matrices, powerflow_jacobian, ptdf)

from test_powerflow_support import pypower_ac, pypower_internal

NETS = ["ieee57", "ieee118", "ieee300"]  # taps, phase shifters (ieee300), parallel branches


@pytest.fixture(scope="module", params=NETS)
def case(request):
    net = load_network(request.param)
    return net, admittance(net), pypower_ac(net), pypower_internal(net)


def _random_voltages(net, seed, n=3):
    rng = np.random.default_rng(seed)
    vm = rng.uniform(0.9, 1.1, (n, net.n_bus))
    va = rng.uniform(-0.5, 0.5, (n, net.n_bus))
    return vm, va


def test_bus_injections_match_pypower_ybus(case):
    net, adm, _, ppc = case
    ybus, _, _ = makeYbus(ppc["baseMVA"], ppc["bus"], ppc["branch"])  # source: PYPOWER makeYbus
    vm, va = _random_voltages(net, 1)
    v = vm * np.exp(1j * va)
    expected = v * np.conj((ybus @ v.T).T)
    got = bus_injections(adm, vm, va)
    assert got.shape == (3, net.n_bus)
    np.testing.assert_allclose(got, expected, atol=1e-10)
    np.testing.assert_allclose(bus_injections(adm, vm[1], va[1]), expected[1], atol=1e-10)


def test_branch_flows_at_pypower_solution(case):
    net, adm, res, _ = case
    vm, va = res["bus"][:, VM], np.deg2rad(res["bus"][:, VA])  # source: PYPOWER runpf
    sf, st_ = branch_flows(adm, vm, va)
    base = net.base_mva
    br = res["branch"]
    np.testing.assert_allclose(sf.real * base, br[:, PF], atol=1e-6)
    np.testing.assert_allclose(sf.imag * base, br[:, QF], atol=1e-6)
    np.testing.assert_allclose(st_.real * base, br[:, PT], atol=1e-6)
    np.testing.assert_allclose(st_.imag * base, br[:, QT], atol=1e-6)


def test_balance_residuals_vanish_at_pypower_solution(case):
    net, adm, res, _ = case
    vm, va = res["bus"][:, VM], np.deg2rad(res["bus"][:, VA])  # source: PYPOWER runpf
    # runpf returns generators in the case's order, with solved PG/QG
    assert np.array_equal(res["gen"][:, GEN_BUS], net.gen_bus)
    dp, dq = balance_residuals(net, adm, vm, va, res["gen"][:, PG], res["gen"][:, QG], net.pd_mw, net.qd_mvar)
    assert np.abs(dp).max() < 1e-6 and np.abs(dq).max() < 1e-6
    # a wrong generator output shows up at its bus, and only there
    pg = res["gen"][:, PG].copy()
    pg[0] += 10.0
    dp2, _ = balance_residuals(net, adm, vm, va, pg, res["gen"][:, QG], net.pd_mw, net.qd_mvar)
    bus = net.gen_bus_idx[0]
    assert dp2[bus] == pytest.approx(-10.0, abs=1e-6)
    assert np.abs(np.delete(dp2, bus)).max() < 1e-6


def _pypower_jacobian(ybus, v, pv, pq):
    """The Jacobian exactly as PYPOWER's newtonpf assembles it from dSbus_dV."""
    ds_dvm, ds_dva = dSbus_dV(ybus, v)
    pvpq = np.r_[pv, pq]
    j11 = ds_dva[np.ix_(pvpq, pvpq)].real
    j12 = ds_dvm[np.ix_(pvpq, pq)].real
    j21 = ds_dva[np.ix_(pq, pvpq)].imag
    j22 = ds_dvm[np.ix_(pq, pq)].imag
    return sp.vstack([sp.hstack([j11, j12]), sp.hstack([j21, j22])]).toarray()


def test_jacobian_matches_pypower_dsbus_dv(case):
    net, adm, _, ppc = case
    ybus, _, _ = makeYbus(ppc["baseMVA"], ppc["bus"], ppc["branch"])  # source: PYPOWER
    vm, va = _random_voltages(net, 2, n=2)
    pv, pq = net.pv_idx, net.pq_idx
    jac = powerflow_jacobian(adm, vm[0], va[0], pv, pq)
    expected = _pypower_jacobian(ybus, vm[0] * np.exp(1j * va[0]), pv, pq)  # source: PYPOWER dSbus_dV
    assert jac.shape == expected.shape
    np.testing.assert_allclose(jac.toarray(), expected, atol=1e-9)
    block = powerflow_jacobian(adm, vm, va, pv, pq).toarray()
    n = expected.shape[0]
    np.testing.assert_allclose(block[:n, :n], expected, atol=1e-9)
    np.testing.assert_allclose(block[n:, n:], _pypower_jacobian(ybus, vm[1] * np.exp(1j * va[1]), pv, pq),
                               atol=1e-9)
    assert np.abs(block[:n, n:]).max() == 0.0


def test_dc_matrices_match_pypower_makebdc(case):
    net, _, _, ppc = case
    bbus, bf, pbusinj, pfinj = dc_matrices(net)
    e_bbus, e_bf, e_pbusinj, e_pfinj = makeBdc(ppc["baseMVA"], ppc["bus"], ppc["branch"])  # source: PYPOWER
    np.testing.assert_allclose(bbus.toarray(), e_bbus.toarray(), atol=1e-9)
    np.testing.assert_allclose(bf.toarray(), e_bf.toarray(), atol=1e-9)
    np.testing.assert_allclose(pbusinj, e_pbusinj, atol=1e-12)
    np.testing.assert_allclose(pfinj, e_pfinj, atol=1e-12)


def test_ptdf_matches_pypower_makeptdf(case):
    net, _, _, ppc = case
    expected = makePTDF(ppc["baseMVA"], ppc["bus"], ppc["branch"], int(net.ref_idx[0]))  # source: PYPOWER
    got = ptdf(net)
    assert got.shape == (net.n_branch, net.n_bus)
    np.testing.assert_allclose(got, expected, atol=1e-9)


def _mismatch(adm, vm, va, pv, pq):
    s = bus_injections(adm, vm, va)
    return np.r_[s.real[np.r_[pv, pq]], s.imag[pq]]


@settings(max_examples=10, deadline=None, derandomize=True)  # same verdict on every run
@given(name=st.sampled_from(["synthetic", "ieee14", "ieee57", "ieee300"]), seed=st.integers(0, 2**31 - 1))
def test_jacobian_agrees_with_central_differences(name, seed):
    # property: the analytic Jacobian equals central finite differences of the mismatch
    if name == "synthetic":
        from flowgauge.network import synthetic
        net = synthetic(50 + seed % 100, seed % 1000)
    else:
        net = load_network(name)
    adm = admittance(net)
    vm, va = _random_voltages(net, seed, n=1)
    vm, va = vm[0], va[0]
    pv, pq = net.pv_idx, net.pq_idx
    jac = powerflow_jacobian(adm, vm, va, pv, pq)
    rng = np.random.default_rng(seed)
    dx = rng.standard_normal(pv.size + 2 * pq.size) * 1e-6
    npvpq = pv.size + pq.size
    h = 1.0
    va_p, va_m, vm_p, vm_m = va.copy(), va.copy(), vm.copy(), vm.copy()
    va_p[np.r_[pv, pq]] += h * dx[:npvpq]
    va_m[np.r_[pv, pq]] -= h * dx[:npvpq]
    vm_p[pq] += h * dx[npvpq:]
    vm_m[pq] -= h * dx[npvpq:]
    fd = (_mismatch(adm, vm_p, va_p, pv, pq) - _mismatch(adm, vm_m, va_m, pv, pq)) / 2
    np.testing.assert_allclose(jac @ dx, fd, atol=1e-11, rtol=1e-6)
