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

from flowgauge._compiled import ELIDE_BYTES, complex_product
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
