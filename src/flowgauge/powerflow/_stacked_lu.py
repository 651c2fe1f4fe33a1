"""Sparse LU of many matrices that share one sparsity pattern, vectorised across samples.

The Newton steps of a batch all use Jacobians with the same pattern. Factorising them one by
one with SuperLU costs hundreds of microseconds each, mostly overhead for such small matrices.
Here the symbolic work is done once per pattern:

* a fill-reducing symmetric ordering (minimum degree on A + A^T), taken from one SuperLU
  factorisation of a diagonally dominant matrix with the pattern, where the diagonal pivots
  are kept, and the filled pattern of L and U for that ordering (symbolic elimination, see
  :func:`_filled_lower`);
* the elimination schedule: pivot k must come after every pivot k' with L[k, k'] != 0; pivots
  of the same level are independent, so each level is one vectorised step over all its
  pivots and all samples (the pattern is structurally symmetric, as a power-flow Jacobian is).

The numeric factorisation then uses the diagonal pivots in that order (static pivoting, as
power-flow programs commonly do with a fixed ordering). It runs in the compiled kernel of
:mod:`._lu_kernel` on a program flattened from the schedule; the level-by-level numpy version
(:meth:`StackedLU.solve_by_entry_numpy`) is kept as its bit-for-bit reference. Every solution is checked by its
residual; a sample whose residual is not small (a tiny pivot) is reported so the caller can
solve it with SuperLU's partial pivoting instead.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ..physics import JacobianPattern
from . import _lu_kernel

__all__ = ["StackedLU", "RESIDUAL_TOL", "fill_reducing_order"]

# A solution whose residual exceeds this times (|A| |x| + |b|) is rejected [relative].
RESIDUAL_TOL = 1e-10


def _ones(rows: np.ndarray, n_rows: int) -> sp.csr_matrix:
    """(n_rows, len(rows)) matrix that sums columns into ``rows``."""
    return sp.csr_matrix((np.ones(rows.size), (rows, np.arange(rows.size))), shape=(n_rows, rows.size))


def _groups(key: np.ndarray, n_groups: int) -> list[np.ndarray]:
    """Positions of ``key`` equal to 0, 1, ..., n_groups - 1, each in increasing order (what
    ``np.flatnonzero(key == g)`` gives for every g)."""
    order = np.argsort(key, kind="stable")
    bounds = np.searchsorted(key[order], np.arange(n_groups + 1))
    return [order[bounds[g]:bounds[g + 1]] for g in range(n_groups)]


def _summing(targets: np.ndarray) -> tuple[np.ndarray, sp.csr_matrix | None]:
    """Where the terms of a step go: (targets, matrix summing the terms into them). Where no
    target repeats, the terms go straight to their targets (matrix None) and ``targets`` keeps
    the terms' order; otherwise ``targets`` are the distinct ones, sorted."""
    tt, inv = np.unique(targets, return_inverse=True)
    if tt.size == targets.size:
        return targets, None
    return tt, _ones(inv, tt.size)


def _apply(op, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """``op(x, y)`` written into ``x`` (a fresh gathered copy): one temporary less."""
    return op(x, y, out=x)


def _minus(x: np.ndarray, m: sp.csr_matrix | None, terms: np.ndarray) -> np.ndarray:
    """``x`` minus the terms summed into their targets, written into ``x`` (a fresh gathered
    copy). Without a matrix (no target repeats) each term is first added to 0.0: bit for bit
    what the sparse product gives (it starts each sum at 0.0, and 0.0 + -0.0 is +0.0)."""
    if m is None:
        terms += 0.0
    else:
        terms = m @ terms
    return np.subtract(x, terms, out=x)


def fill_reducing_order(pat: JacobianPattern, seed: int = 0) -> np.ndarray:
    """A symmetric fill-reducing ordering of the pattern (``old_of_new``, shape (n,)): minimum
    degree on A + A^T, from SuperLU run on a diagonally dominant matrix with the pattern.
    Raises RuntimeError if SuperLU did not keep the diagonal pivots."""
    rng = np.random.Generator(np.random.PCG64(seed))
    probe = pat.matrix(rng.uniform(-1.0, 1.0, pat.nnz)) + sp.identity(pat.n) * (4.0 * pat.n)
    lu = spla.splu(sp.csc_matrix(probe), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                   options={"SymmetricMode": True})
    if not np.array_equal(lu.perm_r, lu.perm_c):
        raise RuntimeError("diagonal pivots were not kept")
    return np.argsort(lu.perm_c).astype(np.int64)


def _filled_lower(n: int, rows: np.ndarray, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Strict lower triangle of the filled pattern of a structurally symmetric matrix with
    entries (rows, cols), eliminated in index order: (i, j) fills when some k < min(i, j) has
    (i, k) and (j, k). Returns its entries (row, col), in no particular order. Row i's entries
    are the pivots met walking up the elimination tree from each k < i with (i, k) in the
    matrix (compiled: :func:`._lu_kernel.filled_rows`)."""
    lo, hi = np.maximum(rows, cols), np.minimum(rows, cols)
    keep = lo != hi
    lo, hi = lo[keep], hi[keep]
    order = np.argsort(lo, kind="stable")
    ptr = np.r_[0, np.cumsum(np.bincount(lo, minlength=n))].astype(np.int64)
    return _lu_kernel.filled_rows(n, ptr, np.ascontiguousarray(hi[order], np.int64))


class StackedLU:
    """Factor-and-solve for a stack of matrices with the CSC pattern of ``pat``, eliminated in
    the order ``old_of_new`` (from :func:`fill_reducing_order`). Raises RuntimeError if the
    schedule cannot be built."""

    def __init__(self, pat: JacobianPattern, old_of_new: np.ndarray):
        n = pat.n
        self.n = n
        self.old_of_new = np.asarray(old_of_new, np.int64)
        self.new_of_old = np.argsort(self.old_of_new)
        jcol = np.repeat(np.arange(n), np.diff(pat.indptr))
        r, c = self.new_of_old[pat.indices], self.new_of_old[jcol]
        low_r, low_c = _filled_lower(n, r, c)
        rows = np.r_[low_r, low_c, np.arange(n)]
        cols = np.r_[low_c, low_r, np.arange(n)]
        keys = np.sort(rows * n + cols)
        self.nnz = keys.size
        self._find = lambda r, c: np.searchsorted(keys, r * n + c)
        self._keys = keys
        # where each Jacobian entry goes in the filled pattern
        self.j_to_f = self._find(r, c)
        if not np.array_equal(keys[self.j_to_f], r * n + c):
            raise RuntimeError("the filled pattern does not contain the matrix")
        self.diag = self._find(np.arange(n), np.arange(n))
        self.j_rows_old, self.j_cols_old = pat.indices.astype(np.int64), jcol
        self._sum_rows = _ones(self.j_rows_old, n)
        # the same sums for the compiled check: each row's entries in increasing order
        self._row_ptr = np.ascontiguousarray(self._sum_rows.indptr, np.int32)
        self._row_entries = np.ascontiguousarray(self._sum_rows.indices, np.int32)
        self._cols32 = np.ascontiguousarray(jcol, np.int32)
        self._schedule(keys // n, keys % n)

    def _basics(self, fr: np.ndarray, fc: np.ndarray):
        """Levels and updates of the elimination: (low, upp, level, a, b, t), where ``low`` and
        ``upp`` are the L entries (i, k), i > k, and strict U entries (k, j), j > k, ``level``
        (n,) the level of each pivot, and update u is F[t_u] -= F[a_u] F[b_u] (L[i, k] U[k, j])."""
        n = self.n
        low = np.flatnonzero(fr > fc)
        upp = np.flatnonzero(fr < fc)
        li, lk = fr[low], fc[low]
        level = np.zeros(n, np.int64)
        while True:  # longest dependency chain; one pass per level
            new = level.copy()
            np.maximum.at(new, li, level[lk] + 1)
            if np.array_equal(new, level):
                break
            level = new
        uk = fr[upp]
        u_order = np.argsort(uk, kind="stable")
        upp_s = upp[u_order]
        u_start = np.r_[0, np.cumsum(np.bincount(uk, minlength=n))]
        reps = u_start[lk + 1] - u_start[lk]
        a = np.repeat(low, reps)
        first = np.repeat(np.cumsum(reps) - reps, reps)
        b = upp_s[np.repeat(u_start[lk], reps) + np.arange(a.size) - first]
        t = self._find(fr[a], fc[b])
        if not np.array_equal(self._keys[np.minimum(t, self.nnz - 1)], fr[a] * n + fc[b]):
            raise RuntimeError("an update falls outside the filled pattern")
        return low, upp, level, a, b, t

    def _schedule(self, fr: np.ndarray, fc: np.ndarray) -> None:
        """The compiled kernel's program (:class:`._lu_kernel.Program`).

        In the level order (what :meth:`solve_by_entry_numpy` runs), level l divides the L
        entries (i, k) of its pivots k by U[k, k], then subtracts from each target the sum of
        its level-l terms, summed in their enumeration order from 0.0. The program does the
        same operations, each target's sums identical, in an order that keeps data close: the
        factorisation row by row (the filled entries are stored row after row) and within a
        row level by level. An update of row i at level l reads L entries of row i, divided
        earlier in the row at level l, and U entries of earlier rows, final."""
        n = self.n
        prog = _lu_kernel.Program()
        i32 = lambda v: np.ascontiguousarray(v, np.int32)  # noqa: E731
        prog.j_to_f, prog.nnz = i32(self.j_to_f), int(self.nnz)
        prog.old_of_new, prog.new_of_old = i32(self.old_of_new), i32(self.new_of_old)
        prog.col, prog.diag = i32(fc), i32(self.diag)
        row_ptr = i32(np.searchsorted(fr, np.arange(n + 1)))
        prog.row_end = row_ptr[1:].copy()
        # the steps (row by row, level by level), their divisions, the updates in the kernel's
        # order (step, L entry (i, k), U entry (k, j): each target's terms in the enumeration
        # order of the level schedule), each to its target or, where the target has more terms
        # in the step, to the sum of its column (compiled: :func:`._lu_kernel.row_steps`)
        (level, prog.div_ptr, prog.div_entry, prog.div_pivot, prog.upd_to, prog.sum_ptr, prog.sum_target,
         ok) = _lu_kernel.row_steps(n, row_ptr, prog.col, prog.diag)
        if not ok:
            raise RuntimeError("an update falls outside the filled pattern")
        n_lev = self.n_levels = int(level.max()) + 1 if n else 1
        low = np.flatnonzero(fr > fc)
        upp = np.flatnonzero(fr < fc)
        # forward substitution level by level: y[i] -= sum of L[i, k] y[k] over the level's k
        levels = np.arange(n_lev)
        prog.fwd_ptr, prog.fwd_target, prog.fwd_term_ptr, prog.fwd_l, prog.fwd_y = _lu_kernel.flat_groups(
            level[fc[low]], levels, fr[low], low, fc[low])
        # backward substitution, last level first: y[k] -= sum of U[k, j] y[j], then y[k] /= U[k, k]
        rev = n_lev - 1 - level
        prog.bwd_ptr, prog.bwd_target, prog.bwd_term_ptr, prog.bwd_u, prog.bwd_y = _lu_kernel.flat_groups(
            rev[fr[upp]], levels, fr[upp], upp, fc[upp])
        p_order = np.argsort(rev, kind="stable")
        prog.piv_ptr = i32(np.searchsorted(rev[p_order], np.r_[levels, n_lev]))
        prog.piv, prog.piv_diag = i32(p_order), i32(self.diag[p_order])
        self.program = prog
        self._fr_fc = (fr, fc)

    def _numpy_steps(self):
        """The level schedule for :meth:`solve_by_entry_numpy` (built on first use)."""
        if getattr(self, "_steps", None) is None:
            fr, fc = self._fr_fc
            low, upp, level, a, b, t = self._basics(fr, fc)
            lk = fc[low]
            # the pivots, L entries, updates and U entries of each level, in increasing index
            # order (a stable sort by level: one pass instead of one search per level)
            by_piv, by_low = _groups(level, self.n_levels), _groups(level[lk], self.n_levels)
            by_upd, by_upp = _groups(level[fc[a]], self.n_levels), _groups(level[fr[upp]], self.n_levels)
            factor_steps, forward_steps, backward_steps = [], [], []
            for lev in range(self.n_levels):  # loop over elimination levels, each vectorised
                piv = by_piv[lev]
                ls = low[by_low[lev]]
                us = by_upd[lev]
                factor_steps.append((ls, self.diag[fc[ls]], a[us], b[us], *_summing(t[us])))
                forward_steps.append((ls, fc[ls], *_summing(fr[ls])))
                ub = upp[by_upp[lev]]
                backward_steps.append((piv, ub, fc[ub], *_summing(fr[ub]), self.diag[piv]))
            backward_steps.reverse()
            self._steps = (factor_steps, forward_steps, backward_steps)
        return self._steps

    def solve(self, data: np.ndarray, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Solve ``A_s x_s = b_s`` for every sample.

        ``data``: (S, nnz) matrix values in the pattern's CSC order; ``rhs``: (S, n).
        Returns ``(x, ok)``: (S, n) and (S,) bool, False where the residual check failed.
        """
        return self.solve_by_entry(np.ascontiguousarray(data.T), rhs)

    def solve_by_entry(self, data: np.ndarray, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """As :meth:`solve`, with ``data`` in the transposed layout (nnz, S). Runs the compiled
        kernel (:mod:`._lu_kernel`); bit for bit what :meth:`solve_by_entry_numpy` gives."""
        x = _lu_kernel.run(self.program, data, rhs)
        ok = _lu_kernel.residual_ok(data, x, rhs, self._row_ptr, self._row_entries, self._cols32, RESIDUAL_TOL)
        return x, ok

    def solve_by_entry_numpy(self, data: np.ndarray, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """As :meth:`solve_by_entry`, vectorised across samples in numpy (the reference the
        compiled kernel is checked against)."""
        f = np.zeros((self.nnz, data.shape[1]))
        f[self.j_to_f] = data
        # rows are gathered with np.take (the same values as f[idx], copied faster); each
        # "f[i] = take(f, i) - u" is what "f[i] -= u" does, written out
        take = np.take
        factor_steps, forward_steps, backward_steps = self._numpy_steps()
        with np.errstate(all="ignore"):
            for ls, ld, a, b, tt, m in factor_steps:
                f[ls] = _apply(np.divide, take(f, ls, axis=0), take(f, ld, axis=0))
                if a.size:
                    f[tt] = _minus(take(f, tt, axis=0), m, _apply(np.multiply, take(f, a, axis=0),
                                                                   take(f, b, axis=0)))
            y = np.ascontiguousarray(rhs.T[self.old_of_new])
            for ls, lk, ri, m in forward_steps:
                if ls.size:
                    y[ri] = _minus(take(y, ri, axis=0), m, _apply(np.multiply, take(f, ls, axis=0),
                                                                   take(y, lk, axis=0)))
            for piv, ub, uj, kk, m, dpiv in backward_steps:
                if ub.size:
                    y[kk] = _minus(take(y, kk, axis=0), m, _apply(np.multiply, take(f, ub, axis=0),
                                                                   take(y, uj, axis=0)))
                y[piv] = _apply(np.divide, take(y, piv, axis=0), take(f, dpiv, axis=0))
            x = y[self.new_of_old].T
            ok = self._residual_ok_numpy(data, x, rhs)
        return np.ascontiguousarray(x), ok

    def _residual_ok_numpy(self, data: np.ndarray, x: np.ndarray, rhs: np.ndarray) -> np.ndarray:
        """Componentwise residual check; ``data`` (nnz, S), ``x`` and ``rhs`` (S, n)."""
        prod = data * x.T[self.j_cols_old]
        res = (self._sum_rows @ prod).T - rhs
        scale = (self._sum_rows @ np.abs(prod)).T + np.abs(rhs)
        good = np.abs(res) <= RESIDUAL_TOL * scale + 1e-300
        return np.isfinite(x).all(axis=1) & good.all(axis=1)
