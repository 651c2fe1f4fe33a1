"""Newton-Raphson in polar coordinates for a stack of samples of one network.

All samples share the Jacobian's sparsity pattern; each iteration evaluates the mismatch
and the Jacobian values of every active sample in one numpy operation, then solves the
Newton steps with sparse LU. Samples leave the active set as soon as they converge, fail or
diverge. The step solve either factorises the block-diagonal matrix of all active samples at
once ("block"), loops over the samples around one SuperLU factorisation each ("loop"), or
uses the LU vectorised across samples of ``_stacked_lu`` ("stacked");
``benchmarks/powerflow.py`` measures all three (docs/powerflow.md records the choice).
"""

from __future__ import annotations

import weakref

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from .._compiled import ELIDE_BYTES, compiled, complex_product, polar_voltage, sparse_row_product
from ..physics import JacobianPattern
from ._stacked_lu import StackedLU, fill_reducing_order
from ._status import CONVERGED, DIVERGED, MAX_ITERATIONS, SINGULAR_JACOBIAN, STATUS_NAMES

__all__ = ["newton", "LINEAR_SOLVERS"]

_CODE = {name: i for i, name in enumerate(STATUS_NAMES)}


# per-pattern linear-algebra data, built on first use
_CACHE: "weakref.WeakKeyDictionary[JacobianPattern, dict]" = weakref.WeakKeyDictionary()


def _cached(pat: JacobianPattern, key: str, build):
    entry = _CACHE.setdefault(pat, {})
    if key not in entry:
        try:
            entry[key] = build()
        except RuntimeError:  # the pattern does not allow it; callers fall back to plain SuperLU
            entry[key] = None
    return entry[key]


def ordering(pat: JacobianPattern) -> np.ndarray | None:
    """The pattern's fill-reducing ordering (None if diagonal pivots cannot be kept)."""
    return _cached(pat, "order", lambda: fill_reducing_order(pat))


def stacked_lu(pat: JacobianPattern) -> StackedLU | None:
    """The pattern's :class:`StackedLU` (None if it cannot be built)."""
    order = ordering(pat)
    return None if order is None else _cached(pat, "stacked", lambda: StackedLU(pat, order))


def ordered_superlu(pat: JacobianPattern) -> "_OrderedSuperLU | None":
    order = ordering(pat)
    return None if order is None else _cached(pat, "superlu", lambda: _OrderedSuperLU(pat, order))


class _OrderedSuperLU:
    """SuperLU (partial pivoting) on the Jacobian permuted once by the fill-reducing ordering
    of :class:`StackedLU`, so no ordering is computed per factorisation."""

    def __init__(self, pat: JacobianPattern, old_of_new: np.ndarray):
        probe = pat.matrix(np.arange(1, pat.nnz + 1, dtype=float))
        perm = sp.csc_matrix(probe[old_of_new][:, old_of_new])
        perm.sort_indices()
        self.data_map = (perm.data - 1).astype(np.int64)
        self.matrix = sp.csc_matrix((np.zeros(pat.nnz), perm.indices, perm.indptr), shape=perm.shape)
        self.old_of_new = old_of_new
        self.new_of_old = np.argsort(old_of_new)

    def solve(self, data: np.ndarray, f: np.ndarray) -> np.ndarray:
        self.matrix.data = data[self.data_map]
        lu = spla.splu(self.matrix, permc_spec="NATURAL")
        return lu.solve(f[self.old_of_new])[self.new_of_old]


def _solve_loop(pat: JacobianPattern, data: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Newton steps sample by sample; returns ``(dx, singular)``.

    Every solver takes ``data`` (nnz, S), the Jacobian values by entry, and ``f`` (S, n)."""
    data = np.ascontiguousarray(data.T)
    dx = np.zeros_like(f)
    singular = np.zeros(f.shape[0], bool)
    ordered = ordered_superlu(pat)
    for k in range(f.shape[0]):  # loop over samples around one sparse factorisation each
        try:
            if ordered is not None:
                dx[k] = ordered.solve(data[k], f[k])
            else:
                dx[k] = spla.splu(pat.matrix(data[k])).solve(f[k])
        except RuntimeError:
            singular[k] = True
    return dx, singular


def _solve_block(pat: JacobianPattern, data: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Newton steps of all samples from one LU of their block-diagonal Jacobian."""
    if f.shape[0] == 1:
        return _solve_loop(pat, data, f)
    try:
        lu = spla.splu(pat.block_diagonal(data.T))
    except RuntimeError:  # some sample is singular: find which, sample by sample
        return _solve_loop(pat, data, f)
    return lu.solve(f.ravel()).reshape(f.shape), np.zeros(f.shape[0], bool)


def _solve_stacked(pat: JacobianPattern, data: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Newton steps from the LU vectorised across samples; samples failing its residual check
    (tiny static pivots) are solved again with SuperLU's partial pivoting."""
    lu = stacked_lu(pat)
    if lu is None:
        return _solve_block(pat, data, f)
    dx, ok = lu.solve_by_entry(data, f)
    singular = np.zeros(f.shape[0], bool)
    if not ok.all():
        redo = np.flatnonzero(~ok)
        dx[redo], singular[redo] = _solve_loop(pat, data[:, redo], f[redo])
    return dx, singular


LINEAR_SOLVERS = {"stacked": _solve_stacked, "block": _solve_block, "loop": _solve_loop}


def _mismatch_numpy(ybus: sp.csr_matrix, vm, va, sbus, pvpq, pq):
    """Mismatch vector [dP(pvpq), dQ(pq)] (S, n), the bus currents (S, n_bus) [p.u.] and
    ``e = exp(j va)``, in numpy (the reference :func:`_mismatch` is checked against)."""
    e = np.exp(1j * va)
    v = vm * e
    i_bus = (ybus @ v.T).T
    mis = v * np.conj(i_bus) - sbus
    return np.concatenate([mis.real[:, pvpq], mis.imag[:, pq]], axis=1), i_bus, e


def _mismatch(ybus: sp.csr_matrix, vm, va, sbus, pvpq, pq):
    """:func:`_mismatch_numpy` compiled (:func:`_mismatch_rows`), bit for bit."""
    y = ybus if ybus.format == "csr" else sp.csr_matrix(ybus)
    vm, va = np.ascontiguousarray(vm, np.float64), np.ascontiguousarray(va, np.float64)
    n_s, n_bus = vm.shape
    f = np.empty((n_s, pvpq.size + pq.size))
    i_bus = np.empty((n_s, n_bus), np.complex128)
    e = np.empty((n_s, n_bus), np.complex128)
    _mismatch_rows(vm, va, np.ascontiguousarray(sbus, np.complex128), y.indptr, y.indices, y.data,
                   pvpq, pq, n_s * n_bus * 16 >= ELIDE_BYTES, f, i_bus, e)
    return f, i_bus, e


@compiled
def _mismatch_rows(vm, va, sbus, indptr, indices, ydata, pvpq, pq, swapped, f, i_bus, e):
    """Per sample, numpy's operations of :func:`_mismatch_numpy` in numpy's rounding:
    ``exp(j va)`` as (cos va, sin va); ``v = vm e`` and ``v conj(I)`` as numpy's complex
    product (:mod:`.._compiled`), the latter with its operands swapped where numpy elides the
    temporary ``conj(I)`` (``swapped``); ``I = Ybus v`` as SciPy's sparse product (each row's
    terms in stored order, summed from 0, the product written out without fused operations)."""
    n_s, n_bus = vm.shape
    v = np.empty(n_bus, np.complex128)
    mis = np.empty(n_bus, np.complex128)
    for s in range(n_s):
        for i in range(n_bus):
            c, sn, vr, vi = polar_voltage(vm[s, i], va[s, i])
            e[s, i] = complex(c, sn)
            v[i] = complex(vr, vi)
        for i in range(n_bus):
            yr, yi = sparse_row_product(indptr, indices, ydata, v, i)
            i_bus[s, i] = complex(yr, yi)
            if swapped:
                mr, mi = complex_product(yr, -yi, v[i].real, v[i].imag)
            else:
                mr, mi = complex_product(v[i].real, v[i].imag, yr, -yi)
            mis[i] = complex(mr - sbus[s, i].real, mi - sbus[s, i].imag)
        for j in range(pvpq.size):
            f[s, j] = mis[pvpq[j]].real
        for j in range(pq.size):
            f[s, pvpq.size + j] = mis[pq[j]].imag


def _hold_voltage(pat: JacobianPattern, hold: np.ndarray, data: np.ndarray, f: np.ndarray) -> None:
    """Replace, in place, the reactive-mismatch row of every held bus by ``dVm = 0``: the row's
    entries become those of the identity and its mismatch zero, so the bus keeps its voltage
    magnitude (a PV bus written in the pattern of a PQ bus). ``hold`` (S, n_pq) bool by
    reactive row; ``data`` (nnz, S); ``f`` (S, n)."""
    q_entry, rows, ident = _cached(pat, "hold", lambda: _reactive_entries(pat))
    _hold_rows(q_entry, rows, ident, np.ascontiguousarray(hold), data, f, pat.pvpq.size)


@compiled
def _hold_rows(q_entry, rows, ident, hold, data, f, npvpq):
    """:func:`_hold_voltage`'s writes, in place: for each entry of a held reactive row its
    identity value, and a zero mismatch."""
    n_s = hold.shape[0]
    for j in range(q_entry.size):
        r, e = rows[j], q_entry[j]
        for s in range(n_s):
            if hold[s, r]:
                data[e, s] = ident[j]
    for s in range(n_s):
        for r in range(hold.shape[1]):
            if hold[s, r]:
                f[s, npvpq + r] = 0.0


@compiled
def _take_steps(va, vm, active, pvpq, pq, dx):
    """``va[active, pvpq] -= dx[:, :len(pvpq)]`` and ``vm[active, pq] -= dx[:, len(pvpq):]``
    in place (each value one subtraction, as numpy's)."""
    npvpq = pvpq.size
    for s in range(active.size):
        a = active[s]
        for j in range(npvpq):
            va[a, pvpq[j]] = va[a, pvpq[j]] - dx[s, j]
        for j in range(pq.size):
            vm[a, pq[j]] = vm[a, pq[j]] - dx[s, npvpq + j]


def _reactive_entries(pat: JacobianPattern):
    """Entries of the reactive-mismatch rows: positions, their row among those rows, and 1.0
    on the row's diagonal (d Q_i / d Vm_i), 0.0 elsewhere."""
    npvpq = pat.pvpq.size
    col = np.repeat(np.arange(pat.n), np.diff(pat.indptr))
    q_entry = np.flatnonzero(pat.indices >= npvpq)
    ident = (pat.indices[q_entry] == col[q_entry]).astype(float)
    return q_entry, pat.indices[q_entry] - npvpq, ident


def newton(pat: JacobianPattern, ybus: sp.csr_matrix, vm: np.ndarray, va: np.ndarray,
           sbus: np.ndarray, tol: float, max_iter: int, linear: str = "stacked",
           hold: np.ndarray | None = None):
    """Solve the power flows of all samples.

    ``vm`` [p.u.], ``va`` [rad]: start values, shape (S, n_bus), fixed at PV (vm) and
    reference (vm, va) buses; ``sbus``: specified injections (S, n_bus) complex [p.u.].
    ``hold`` (S, len(pat.pq)) bool, optional: per sample, the buses of ``pat.pq`` whose
    voltage magnitude is held at its start value (PV buses of that sample, solved in the
    pattern where every non-reference bus is PQ; see :func:`_hold_voltage`).
    Converged when ``max |mismatch| < tol`` [p.u.] (a number, or one per sample). Returns
    ``(vm, va, iterations, status, max_mismatch)`` with status names from ``STATUSES``.
    """
    solve = LINEAR_SOLVERS[linear]
    vm, va = np.array(vm, dtype=float), np.array(va, dtype=float)
    n_s = vm.shape[0]
    tol_all = np.broadcast_to(np.asarray(tol, dtype=float), (n_s,))  # one tolerance per sample
    pvpq, pq, npvpq = pat.pvpq, pat.pq, pat.pvpq.size
    hold_a = hold
    iterations = np.zeros(n_s, np.int64)
    code = np.full(n_s, _CODE[MAX_ITERATIONS])
    max_mis = np.zeros(n_s)
    active = np.arange(n_s)
    # while every sample is still active, work on the arrays themselves instead of copies
    vm_a, va_a, sbus_a = vm, va, sbus
    with np.errstate(all="ignore"):
        for it in range(max_iter + 1):
            f, i_bus, e = _mismatch(ybus, vm_a, va_a, sbus_a, pvpq, pq)
            if hold_a is not None:
                f[:, npvpq:][hold_a] = 0.0
            norm = np.abs(f).max(axis=1, initial=0.0)
            finite = np.isfinite(norm) & np.isfinite(vm_a).all(axis=1) & np.isfinite(va_a).all(axis=1)
            max_mis[active] = np.where(finite, norm, np.inf)
            iterations[active] = it
            done = finite & (norm < tol_all[active])
            keep = finite & ~done
            code[active[done]] = _CODE[CONVERGED]
            code[active[~finite]] = _CODE[DIVERGED]
            if it == max_iter or not keep.any():
                break
            vm_k, hold_k = vm_a, hold_a
            if not keep.all():
                active, f, i_bus, e, vm_k = active[keep], f[keep], i_bus[keep], e[keep], vm_a[keep]
                hold_k = None if hold_a is None else hold_a[keep]
            t = np.ascontiguousarray
            data = pat.values_by_entry(t(vm_k.T), t(e.T), t(i_bus.T))
            if hold_k is not None:
                _hold_voltage(pat, hold_k, data, f)
            dx, singular = solve(pat, data, f)
            if singular.any():
                code[active[singular]] = _CODE[SINGULAR_JACOBIAN]
                active, dx = active[~singular], dx[~singular]
                if hold_k is not None:
                    hold_k = hold_k[~singular]
                if active.size == 0:
                    break
            _take_steps(va, vm, active, pvpq, pq, np.ascontiguousarray(dx))
            if active.size == n_s:
                vm_a, va_a, sbus_a = vm, va, sbus
            else:
                vm_a, va_a, sbus_a = vm[active], va[active], sbus[active]
            hold_a = hold_k
    status = np.array(STATUS_NAMES)[code]
    return vm, va, iterations, status, max_mis
