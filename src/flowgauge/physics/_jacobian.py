"""The sparse power-flow Jacobian in polar coordinates, filled for many samples at once.

Unknowns: voltage angles at PV and PQ buses, then voltage magnitudes at PQ buses.
Equations: active-power mismatch at PV and PQ buses, then reactive-power mismatch at PQ buses.
The sparsity pattern depends only on the network and the bus types, so it is computed once
(:class:`JacobianPattern`) and the values of all samples are filled with one numpy operation.

Derivatives of ``S = diag(V) conj(Ybus V)``, entry (i, k) of the Ybus pattern, with
``I = Ybus V`` (R. D. Zimmerman, "AC Power Flows, Generalized OPF Costs and their Derivatives
using Complex Matrix Notation", MATPOWER Technical Note 2, 2010)::

    dS_i/dVa_k = -j V_i conj(Y_ik V_k)            + [i == k] j V_i conj(I_i)
    dS_i/dVm_k =    V_i conj(Y_ik exp(j Va_k))     + [i == k] conj(I_i) exp(j Va_i)
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .._compiled import ELIDE_BYTES, compiled, complex_product
from ._admittance import Admittance

__all__ = ["JacobianPattern", "powerflow_jacobian"]


@compiled
def _fill(vm, e, i_bus, y, rows, cols, is_diag, out_pos, elided, out):
    """The Jacobian values of :meth:`JacobianPattern.values_by_entry_numpy`, entry by entry,
    with numpy's operations in numpy's order and rounding. ``elided``: the diagonal terms'
    temporaries (``v[d]``, ``e[d]``, one per diagonal and sample) are at least
    :data:`ELIDE_BYTES`, so numpy multiplies them with their operands swapped."""
    n_s = vm.shape[1]
    for k in range(rows.size):  # loop over Ybus entries; each fills up to four Jacobian entries
        r, c = rows[k], cols[k]
        for s in range(n_s):
            ev, ec = e[r, s], e[c, s]
            vr, vi = complex_product(vm[r, s], 0.0, ev.real, ev.imag)  # v = vm e
            pr, pi = complex_product(y[k].real, y[k].imag, ec.real, ec.imag)  # y e[c]
            mr, mi = complex_product(vr, vi, pr, -pi)  # dvm = v[r] conj(y e[c])
            ar, ai = complex_product(mr, mi, vm[c, s], 0.0)  # dva = dvm vm[c]
            ar, ai = complex_product(ar, ai, -0.0, -1.0)  # dva *= -1j
            if is_diag[k]:
                cr, ci = i_bus[r, s].real, -i_bus[r, s].imag  # conj(I)
                if elided:  # 1j * v[d] * ci, then ci * e[d]
                    tr, ti = complex_product(vr, vi, 0.0, 1.0)
                else:
                    tr, ti = complex_product(0.0, 1.0, vr, vi)
                wr, wi = complex_product(tr, ti, cr, ci)
                ar, ai = ar + wr, ai + wi
                if elided:
                    wr, wi = complex_product(ev.real, ev.imag, cr, ci)
                else:
                    wr, wi = complex_product(cr, ci, ev.real, ev.imag)
                mr, mi = mr + wr, mi + wi
            if out_pos[0, k] >= 0:
                out[out_pos[0, k], s] = ar
            if out_pos[1, k] >= 0:
                out[out_pos[1, k], s] = mr
            if out_pos[2, k] >= 0:
                out[out_pos[2, k], s] = ai
            if out_pos[3, k] >= 0:
                out[out_pos[3, k], s] = mi


class JacobianPattern:
    """Fixed CSC pattern of the Jacobian for one network and one choice of PV/PQ buses.

    ``pv``, ``pq``: bus positions, int arrays. ``n`` is the order of the Jacobian
    (len(pv) + 2 len(pq)); ``indptr``/``indices`` its CSC structure; :meth:`values` fills
    the data of every sample.
    """

    def __init__(self, ybus: sp.spmatrix, pv: np.ndarray, pq: np.ndarray):
        nb = ybus.shape[0]
        # The pattern of Ybus plus its full diagonal (the diagonal derivative terms always exist).
        pat = (sp.csr_matrix(ybus) + sp.identity(nb, dtype=complex, format="csr") * 0).tocoo()
        struct = sp.csr_matrix((np.ones(pat.nnz), (pat.row, pat.col)), shape=(nb, nb))
        struct.sum_duplicates()
        struct.sort_indices()
        rows = np.repeat(np.arange(nb), np.diff(struct.indptr))
        cols = struct.indices.astype(np.int64)
        ycsr = sp.csr_matrix(ybus)
        self.y = np.asarray(ycsr[rows, cols]).ravel().astype(complex)
        self.rows, self.cols = rows, cols
        self.diag = np.flatnonzero(rows == cols)
        self.diag_bus = rows[self.diag]
        pv = np.asarray(pv, np.int64)
        pq = np.asarray(pq, np.int64)
        pvpq = np.r_[pv, pq]
        self.pv, self.pq, self.pvpq = pv, pq, pvpq
        npvpq, npq = pvpq.size, pq.size
        self.n = npvpq + npq
        pos_a = np.full(nb, -1)
        pos_a[pvpq] = np.arange(npvpq)
        pos_m = np.full(nb, -1)
        pos_m[pq] = npvpq + np.arange(npq)
        nnz = rows.size
        src, jr, jc = [], [], []
        # blocks: (row map, col map, offset of the value array: 0 Re dVa, 1 Re dVm, 2 Im dVa, 3 Im dVm)
        for rmap, cmap, part in ((pos_a, pos_a, 0), (pos_a, pos_m, 1), (pos_m, pos_a, 2), (pos_m, pos_m, 3)):
            r, c = rmap[rows], cmap[cols]
            keep = np.flatnonzero((r >= 0) & (c >= 0))
            src.append(part * nnz + keep)
            jr.append(r[keep])
            jc.append(c[keep])
        src, jr, jc = np.concatenate(src), np.concatenate(jr), np.concatenate(jc)
        order = np.lexsort((jr, jc))
        self.src = src[order]
        self.indices = jr[order].astype(np.int32)
        self.indptr = np.r_[0, np.cumsum(np.bincount(jc, minlength=self.n))].astype(np.int32)
        self.nnz = int(self.src.size)
        part, idx = self.src // nnz, self.src % nnz
        self._parts = [(np.flatnonzero(part == k), idx[part == k]) for k in range(4)]
        # for the compiled fill: where each Ybus entry's four values go (-1: not in the Jacobian)
        self._out_pos = np.full((4, nnz), -1, np.int32)
        for k, (pos, i) in enumerate(self._parts):
            self._out_pos[k, i] = pos
        self._is_diag = rows == cols
        self._rows32, self._cols32 = rows.astype(np.int32), cols.astype(np.int32)

    def values(self, vm: np.ndarray, e: np.ndarray, i_bus: np.ndarray) -> np.ndarray:
        """Jacobian data for every sample, shape (n_samples, nnz), in CSC order.

        ``vm`` [p.u.] and ``e = exp(j va)``: shape (n_samples, n_bus); ``i_bus = Ybus V``
        (complex, same shape) [p.u.].
        """
        t = np.ascontiguousarray
        return t(self.values_by_entry(t(vm.T), t(e.T), t(i_bus.T)).T)

    def values_by_entry(self, vm: np.ndarray, e: np.ndarray, i_bus: np.ndarray) -> np.ndarray:
        """As :meth:`values`, in the transposed layout the solvers use: inputs shape
        (n_bus, n_samples), result (nnz, n_samples). Compiled (:func:`_fill`); bit for bit what
        :meth:`values_by_entry_numpy` gives."""
        vm = np.ascontiguousarray(vm, np.float64)
        e = np.ascontiguousarray(e, np.complex128)
        i_bus = np.ascontiguousarray(i_bus, np.complex128)
        out = np.empty((self.nnz, vm.shape[1]))
        elided = self.diag.size * vm.shape[1] * 16 >= ELIDE_BYTES
        _fill(vm, e, i_bus, self.y, self._rows32, self._cols32, self._is_diag, self._out_pos, elided, out)
        return out

    def values_by_entry_numpy(self, vm: np.ndarray, e: np.ndarray, i_bus: np.ndarray) -> np.ndarray:
        """:meth:`values_by_entry` in numpy (the reference the compiled fill is checked against)."""
        v = vm * e
        dvm = v[self.rows] * np.conj(self.y[:, None] * e[self.cols])
        dva = dvm * vm[self.cols]
        dva *= -1j
        d = self.diag_bus
        ci = np.conj(i_bus[d])
        dva[self.diag] += 1j * v[d] * ci
        dvm[self.diag] += ci * e[d]
        out = np.empty((self.nnz, v.shape[1]))
        for (pos, idx), src in zip(self._parts, (dva.real, dvm.real, dva.imag, dvm.imag)):
            out[pos] = src[idx]  # the four blocks of the Jacobian
        return out

    def matrix(self, data: np.ndarray) -> sp.csc_matrix:
        """The Jacobian of one sample from its data (shape (nnz,))."""
        return sp.csc_matrix((data, self.indices, self.indptr), shape=(self.n, self.n))

    def block_diagonal(self, data: np.ndarray) -> sp.csc_matrix:
        """The block-diagonal Jacobian of several samples from their data (n_samples, nnz)."""
        k, n, nnz = data.shape[0], self.n, self.nnz
        offs = np.arange(k, dtype=np.int64)
        indices = (self.indices[None, :] + (offs * n)[:, None]).ravel()
        indptr = np.r_[(self.indptr[None, :-1] + (offs * nnz)[:, None]).ravel(), k * nnz]
        return sp.csc_matrix((data.ravel(), indices, indptr), shape=(k * n, k * n))


def powerflow_jacobian(adm: Admittance, vm: np.ndarray, va: np.ndarray, pv: np.ndarray,
                       pq: np.ndarray) -> sp.csr_matrix:
    """The power-flow Jacobian d[P(pv,pq); Q(pq)] / d[Va(pv,pq); Vm(pq)].

    ``vm`` [p.u.], ``va`` [rad]: shape (n_bus,) gives one (n, n) matrix with
    n = len(pv) + 2 len(pq); shape (n_samples, n_bus) gives the block-diagonal matrix of all
    samples, (n_samples n, n_samples n). ``pv``, ``pq``: bus positions. Returns CSR.
    """
    vm2, va2 = np.atleast_2d(np.asarray(vm, float)), np.atleast_2d(np.asarray(va, float))
    pat = JacobianPattern(adm.ybus, pv, pq)
    e = np.exp(1j * va2)
    data = pat.values(vm2, e, (adm.ybus @ (vm2 * e).T).T)
    if np.ndim(vm) == 1:
        return pat.matrix(data[0]).tocsr()
    return pat.block_diagonal(data).tocsr()
