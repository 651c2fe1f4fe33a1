"""The compiled Jacobian fill and Newton mismatch give numpy's bits; their complex product rounds as
the formula says.

The power-flow scores of the frozen board depend on the last bits of the Jacobian and the
mismatch, so the compiled loops (``JacobianPattern.values_by_entry``, ``powerflow._newton._mismatch``)
must give exactly what the numpy expressions they replaced give (``values_by_entry_numpy``,
``_mismatch_numpy``), for sample counts on both sides of numpy's temporary-elision size (where
numpy swaps a product's operands). The complex product is checked against exact rational
arithmetic: re = fma(ar, br, -(ai bi)), im = fma(ar, bi, ai br), each fma rounded once (IEEE 754
fused multiply-add; an exact rational is rounded to the nearest double by ``float(Fraction)``).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from numba import njit

from flowgauge._compiled import ELIDE_BYTES, complex_abs, complex_product
from flowgauge.network import load_network
from flowgauge.powerflow._prepare import prepared


@njit
def _products(a, b):
    out = np.empty((a.size, 2))
    for k in range(a.size):
        out[k, 0], out[k, 1] = complex_product(a[k].real, a[k].imag, b[k].real, b[k].imag)
    return out


def _fma_exact(x: float, y: float, z: float) -> float:
    return float(Fraction(x) * Fraction(y) + Fraction(z))


def test_complex_product_is_the_fused_formula_exactly():
    rng = np.random.default_rng(3)
    a = rng.standard_normal(400) * 10.0 ** rng.integers(-3, 4, 400) + 1j * rng.standard_normal(400)
    b = rng.standard_normal(400) + 1j * rng.standard_normal(400) * 10.0 ** rng.integers(-3, 4, 400)
    got = _products(a, b)
    for k in range(a.size):
        ar, ai, br, bi = a[k].real, a[k].imag, b[k].real, b[k].imag
        assert got[k, 0] == _fma_exact(ar, br, -(ai * bi))
        assert got[k, 1] == _fma_exact(ar, bi, ai * br)


@pytest.mark.parametrize("name", ["ieee14", "ieee118"])
def test_compiled_fill_gives_numpy_bits(name):
    net = load_network(name)
    p = prepared(net)
    pat = p.pattern(p.pv, p.pq)
    # sample counts around the elision size of the diagonal terms' temporaries
    edge = ELIDE_BYTES // (16 * pat.diag.size)
    rng = np.random.default_rng(11)
    for s in sorted({1, 2, 7, 8, 9, 33, edge - 1, edge, edge + 1, edge + 9}):
        vm = rng.uniform(0.9, 1.1, (net.n_bus, s))
        e = np.exp(1j * rng.uniform(-0.6, 0.6, (net.n_bus, s)))
        i_bus = np.ascontiguousarray(p.adm.ybus @ (vm * e))
        got = pat.values_by_entry(vm, e, i_bus)
        ref = pat.values_by_entry_numpy(vm, e, i_bus)
        assert got.tobytes() == ref.tobytes(), f"{name}, {s} samples"


@pytest.mark.parametrize("name", ["ieee14", "ieee118"])
def test_compiled_mismatch_gives_numpy_bits(name):
    # the Newton loop's mismatch, bus currents and exp(j va), compiled (powerflow._newton)
    from flowgauge.powerflow._newton import _mismatch, _mismatch_numpy

    net = load_network(name)
    p = prepared(net)
    pat = p.pattern(p.pv, p.pq)
    edge = ELIDE_BYTES // (16 * net.n_bus)  # numpy swaps the product's operands from here on
    rng = np.random.default_rng(5)
    for s in sorted({1, 3, 8, edge, edge + 1, edge + 7}):
        vm = rng.uniform(0.9, 1.1, (s, net.n_bus))
        va = rng.uniform(-0.7, 0.7, (s, net.n_bus))
        sbus = rng.standard_normal((s, net.n_bus)) + 1j * rng.standard_normal((s, net.n_bus))
        got = _mismatch(p.adm.ybus, vm, va, sbus, pat.pvpq, pat.pq)
        ref = _mismatch_numpy(p.adm.ybus, vm, va, sbus, pat.pvpq, pat.pq)
        for a, b, what in zip(got, ref, ("mismatch", "bus currents", "exp(j va)")):
            assert np.ascontiguousarray(a).tobytes() == np.ascontiguousarray(b).tobytes(), f"{name}, {s} samples: {what}"


@pytest.mark.parametrize("name", ["ieee14", "ieee118"])
def test_compiled_pv_reactive_outputs_give_numpy_bits(name):
    # the switching rounds' reactive output per PV bus, compiled (powerflow._switching); the
    # operand order of v conj(I) flips at the elision size, so both sides are checked
    from flowgauge.powerflow._switching import _pv_generation_mvar, _pv_generation_mvar_numpy

    net = load_network(name)
    p = prepared(net)
    edge = ELIDE_BYTES // (16 * p.pv.size)
    rng = np.random.default_rng(8)
    for s in sorted({1, 4, edge - 1, edge, edge + 1, edge + 91}):
        vm = rng.uniform(0.9, 1.1, (s, net.n_bus))
        va = rng.uniform(-0.7, 0.7, (s, net.n_bus))
        qd = rng.standard_normal((s, p.pv.size)) * 30.0
        got = _pv_generation_mvar(p, vm, va, qd)
        ref = _pv_generation_mvar_numpy(p, vm, va, qd)
        assert got.tobytes() == ref.tobytes(), f"{name}, {s} samples"


@pytest.mark.parametrize("name", ["ieee14", "ieee118"])
def test_compiled_flows_give_numpy_bits(name):
    # the power flow's bus injections, generator outputs and branch flows (powerflow._ac), on
    # both sides of the elision size of conj(I); finite voltages (a diverged sample's values are
    # replaced by NaN before anything uses them, so its NaN payloads are not compared)
    from flowgauge.powerflow._ac import _assemble_fields, _assemble_fields_numpy

    net = load_network(name)
    p = prepared(net)
    edge = ELIDE_BYTES // (16 * net.n_bus)
    rng = np.random.default_rng(9)
    for s in sorted({1, 5, edge - 1, edge, edge + 1, edge + 40}):
        vm = rng.uniform(0.9, 1.1, (s, net.n_bus))
        va = rng.uniform(-0.7, 0.7, (s, net.n_bus))
        pg, qg = rng.uniform(0, 100, (s, net.n_gen)), rng.uniform(-50, 50, (s, net.n_gen))
        pd, qd = rng.uniform(0, 50, (s, net.n_load)), rng.uniform(-10, 20, (s, net.n_load))
        fixed = rng.random((s, net.n_gen)) < 0.3
        got = _assemble_fields(p, vm, va, pg, qg, pd, qd, fixed)
        ref = _assemble_fields_numpy(p, vm, va, pg, qg, pd, qd, fixed)
        assert set(got) == set(ref)
        for key in ref:
            assert np.ascontiguousarray(got[key]).tobytes() == np.ascontiguousarray(ref[key]).tobytes(), \
                f"{name}, {s} samples: {key}"


@njit
def _magnitudes(z):
    out = np.empty(z.size)
    for k in range(z.size):
        out[k] = complex_abs(z[k].real, z[k].imag)
    return out


def test_complex_abs_is_numpys_absolute_value():
    rng = np.random.default_rng(6)
    z = np.empty(20000, complex)
    z.real = rng.standard_normal(z.size) * 10.0 ** rng.integers(-8, 8, z.size)
    z.imag = rng.standard_normal(z.size) * 10.0 ** rng.integers(-8, 8, z.size)
    special = [0.0, -0.0, np.inf, -np.inf, np.nan, 1e308, 5e-324, 3.0]
    z[:64].real = np.repeat(special, 8)
    z[:64].imag = np.tile(special, 8)
    got, ref = _magnitudes(z), np.abs(z)
    assert got.tobytes() == ref.tobytes()
    # libm's hypot rounds differently often: the check above is not trivially met
    assert (np.hypot(z.real, z.imag) != ref).mean() > 0.1
