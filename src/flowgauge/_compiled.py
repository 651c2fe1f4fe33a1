"""Helpers for the project's compiled loops (numba): the compile decorator and numpy's complex
product written out.

Compiled loops here must give the bits of the numpy code they replace. numpy (2.x on x86-64
with FMA) multiplies complex numbers a b as

    re = fma(a.re, b.re, -(a.im b.im)),    im = fma(a.re, b.im, a.im b.re)

(one rounding for the fused multiply-add), and a real operand takes part as (x, +0.0).
:func:`complex_product` is that formula; ``tests/test_compiled_bits.py`` checks it
against exact rational arithmetic, and the compiled Jacobian against numpy's, bit for bit.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from numba.core import types
from numba.extending import intrinsic

__all__ = ["compiled", "fma", "complex_product", "complex_abs", "polar_voltage", "sparse_row_product",
           "ELIDE_BYTES"]

# numpy computes ``x * t`` as ``t * x`` in t's memory when t is a temporary array of at least
# this many bytes (its "temporary elision"); for a complex product the operand order changes the
# imaginary part's rounding, so compiled loops swap the operands where numpy does
ELIDE_BYTES = 256 * 1024


def compiled(fn):
    """``fn`` compiled on first use; the machine code is cached on disk (next to its module, or
    in numba's user-wide cache folder) where a writable place exists, and kept in memory only
    where none does (numba refuses to cache there)."""
    try:
        return njit(cache=True, error_model="numpy", nogil=True)(fn)
    except RuntimeError:
        return njit(error_model="numpy", nogil=True)(fn)


@intrinsic
def fma(typingctx, a, b, c):
    """a b + c with one rounding (LLVM's fma: the processor's instruction, or an exact library
    routine where there is none)."""
    sig = types.float64(types.float64, types.float64, types.float64)

    def codegen(context, builder, signature, args):
        return builder.fma(*args)

    return sig, codegen


@njit(inline="always")
def complex_product(ar, ai, br, bi):
    """(re, im) of (ar + j ai)(br + j bi), rounded as numpy rounds it (module docstring)."""
    return fma(ar, br, -(ai * bi)), fma(ar, bi, ai * br)


@njit(inline="always")
def complex_abs(re, im):
    """|re + j im| as numpy 2's vectorised absolute value computes it: sqrt(fma(r, r, 1)) times
    the larger magnitude, r the smaller over the larger (0 when the larger is 0 or the smaller
    infinite); infinite if either part is, else NaN if either part is. libm's ``hypot`` rounds
    differently in about a third of cases."""
    a, b = abs(re), abs(im)
    if a == np.inf or b == np.inf:
        return np.inf
    if a != a or b != b:
        return np.nan
    larger, smaller = max(a, b), min(a, b)
    ratio = 0.0 if larger == 0.0 or smaller == np.inf else smaller / larger
    return np.sqrt(fma(ratio, ratio, 1.0)) * larger


@njit(inline="always")
def polar_voltage(vm, va):
    """(cos va, sin va, re, im) of ``vm * exp(1j * va)`` as numpy computes it (numba's cos and
    sin are numpy's exp of ``j va`` bit for bit for finite ``va``)."""
    c, sn = np.cos(va), np.sin(va)
    vr, vi = complex_product(vm, 0.0, c, sn)
    return c, sn, vr, vi


@njit(inline="always")
def sparse_row_product(indptr, indices, data, v, i):
    """(re, im) of row ``i`` of a complex CSR matrix times the complex vector ``v``, as SciPy's
    sparse product computes it: the row's terms in stored order, summed from 0, each product
    written out without fused operations."""
    yr, yi = 0.0, 0.0
    for jj in range(indptr[i], indptr[i + 1]):
        a, x = data[jj], v[indices[jj]]
        yr = yr + (a.real * x.real - a.imag * x.imag)
        yi = yi + (a.real * x.imag + a.imag * x.real)
    return yr, yi
