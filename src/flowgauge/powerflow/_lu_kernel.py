"""Compiled numeric factor-and-solve for :class:`~._stacked_lu.StackedLU`'s fixed schedule.

The schedule (which entries divide, which updates go where, in which order) is built once per
sparsity pattern: the filled pattern (:func:`filled_rows`) and the factorisation's steps
(:func:`row_steps`) in compiled loops here, the rest in numpy (``StackedLU._schedule``). This
module runs it in machine code (numba) on a few samples at a time, whose filled LU (some 80,000
entries a sample on a 2,000-bus Jacobian) stays in the processor's cache, where the vectorised
numpy version streams every level of every sample of a batch through memory.

The results are bit for bit those of the vectorised version (``StackedLU.solve_by_entry_numpy``):
the same IEEE operations on the same operands, each target's terms summed in the same order,
starting from 0.0 (what a sparse product does), with no fused multiply-add (numba's default,
``fastmath=False``). ``tests/test_powerflow_stacked_lu.py`` checks this.

A block of ``BLOCK`` = 8 samples is factorised side by side, each entry's 8 values in one cache
line (blocks of 4 ran at half the speed, 16 at about the same). Within a row's step the
updates run row-oriented: for each L entry (i, k), U's row k is read in storage order, and the
program holds only one target position per update (most targets have a single term in a step;
the few with more sum into a dense row by column). Reading one index per update instead of
three made the factorisation about 1.5x faster on a 2,000-bus Jacobian. The loops over the 8
lanes are compiled with LLVM's straight-line (SLP) vectoriser, which numba leaves off by
default: it is switched on while this module's kernel runs (and so compiles), and restored after
(:func:`run`).
Vector lanes do the same IEEE operations as scalar code, so this changes speed, not bits.
"""

from __future__ import annotations

import numpy as np
from numba.core import config as _numba_config

from .._compiled import compiled as _compiled

__all__ = ["Program", "run", "row_steps", "filled_rows", "BLOCK"]

# Samples factorised side by side (a compile-time constant of the kernel): each schedule index
# read serves 8 samples, and their values of one entry share a cache line.
BLOCK = 8


class Program:
    """The schedule as flat integer arrays (steps of the factorisation, levels of the solves)."""

    __slots__ = ("j_to_f", "nnz", "old_of_new", "new_of_old",
                 "div_ptr", "div_entry", "div_pivot", "col", "diag", "row_end", "upd_to",
                 "sum_ptr", "sum_target",
                 "fwd_ptr", "fwd_target", "fwd_term_ptr", "fwd_l", "fwd_y",
                 "bwd_ptr", "bwd_target", "bwd_term_ptr", "bwd_u", "bwd_y",
                 "piv_ptr", "piv", "piv_diag")


def flat_groups(key: np.ndarray, steps: np.ndarray, target: np.ndarray, a: np.ndarray, b: np.ndarray):
    """Terms (a, b) of target ``target`` in step ``key`` (all (n_terms,), in enumeration
    order), grouped by step (in the order of ``steps``, sorted) and within a step by target.
    Returns (step pointer into the groups, group targets, group pointer into the terms, a, b),
    as int32; each group's terms keep their enumeration order (the order a sparse product
    sums them in)."""
    span = int(target.max()) + 1 if target.size else 1
    order = np.argsort(key.astype(np.int64) * span + target, kind="stable")  # ties keep the enumeration order
    k, tg = key[order], target[order]
    new = np.ones(k.size, bool)
    new[1:] = (k[1:] != k[:-1]) | (tg[1:] != tg[:-1])
    g_start = np.flatnonzero(new)
    i32 = lambda v: np.ascontiguousarray(v, np.int32)  # noqa: E731
    step_ptr = np.searchsorted(k[g_start], np.r_[steps, steps[-1] + 1 if steps.size else 0])
    return (i32(step_ptr), i32(tg[g_start]), i32(np.r_[g_start, k.size]), i32(a[order]), i32(b[order]))


@_compiled
def filled_rows(n, ptr, cols):
    """The strict lower triangle of the filled pattern (see ``_stacked_lu._filled_lower``):
    ``cols[ptr[i]:ptr[i + 1]]`` the matrix's entries (i, k), k < i. Returns (row, col) arrays."""
    parent = np.full(n, -1, np.int64)
    flag = np.full(n, -1, np.int64)
    cap = max(16, 2 * cols.size)
    out_r = np.empty(cap, np.int64)
    out_c = np.empty(cap, np.int64)
    m = 0
    for i in range(n):
        flag[i] = i
        for p in range(ptr[i], ptr[i + 1]):
            k = cols[p]
            while flag[k] != i:  # up the elimination tree until a pivot already met in row i
                if parent[k] == -1:
                    parent[k] = i
                if m == cap:
                    cap *= 2
                    grown_r = np.empty(cap, np.int64)
                    grown_c = np.empty(cap, np.int64)
                    grown_r[:m] = out_r[:m]
                    grown_c[:m] = out_c[:m]
                    out_r, out_c = grown_r, grown_c
                out_r[m] = i
                out_c[m] = k
                m += 1
                flag[k] = i
                k = parent[k]
    return out_r[:m].copy(), out_c[:m].copy()


@_compiled
def row_steps(n, row_ptr, col, diag):
    """The factorisation's program from the filled pattern (entries of row i at
    ``row_ptr[i]:row_ptr[i + 1]``, columns increasing, ``col`` their columns, ``diag[i]`` the
    position of (i, i)). Returns ``(level, div_ptr, div_entry, div_pivot, upd_to, sum_ptr,
    sum_target, ok)``:

    * ``level[i]``: 0 for a pivot without L entries, else 1 + the largest level of the pivots k
      of its L entries (i, k);
    * the steps, row by row and within a row by level: ``div_entry`` the step's L entries in
      increasing position, ``div_pivot`` their pivots' positions, ``div_ptr`` the steps' bounds;
    * ``upd_to``: per update (i, k, j), in the kernel's order (step, L entry, U's row k), the
      target position, or -1 - j where the target (i, j) has more than one term in the step;
      ``sum_target`` those targets by step (``sum_ptr``), in increasing position;
    * ``ok``: False if an update's target is not in the filled pattern."""
    n_low = 0
    n_upd = 0
    level = np.zeros(n, np.int64)
    for i in range(n):  # rows in order: the pivots of row i's L entries are finished
        lv = 0
        for e in range(row_ptr[i], diag[i]):
            k = col[e]
            lv = max(lv, level[k] + 1)
            n_upd += row_ptr[k + 1] - diag[k] - 1
        level[i] = lv
        n_low += diag[i] - row_ptr[i]
    div_ptr = np.empty(n_low + 1, np.int32)
    div_entry = np.empty(n_low, np.int32)
    div_pivot = np.empty(n_low, np.int32)
    upd_to = np.empty(n_upd, np.int32)
    sum_ptr = np.empty(n_low + 1, np.int32)
    sum_target = np.empty(n_upd, np.int32)
    pos = np.full(n, -1, np.int64)  # position of (i, j) in row i, by column j
    count = np.zeros(n, np.int64)  # terms of target (i, j) in the current step
    span = row_ptr[n] + 1
    ok = True
    n_steps, nd, m, ns = 0, 0, 0, 0
    div_ptr[0] = 0
    sum_ptr[0] = 0
    for i in range(n):
        r0, r1, d0 = row_ptr[i], row_ptr[i + 1], diag[i]
        for e in range(r0, r1):
            pos[col[e]] = e
        keys = np.empty(d0 - r0, np.int64)
        for e in range(r0, d0):
            keys[e - r0] = level[col[e]] * span + e
        keys.sort()  # by level, then position
        g = 0
        while g < keys.size:  # one step: the L entries of one level
            lv = keys[g] // span
            h = g
            while h < keys.size and keys[h] // span == lv:
                h += 1
            for u in range(g, h):
                e = keys[u] % span
                div_entry[nd] = e
                div_pivot[nd] = diag[col[e]]
                nd += 1
                k = col[e]
                for q in range(diag[k] + 1, row_ptr[k + 1]):
                    if pos[col[q]] < 0:
                        ok = False
                    count[col[q]] += 1
            first = ns
            for u in range(g, h):
                k = col[keys[u] % span]
                for q in range(diag[k] + 1, row_ptr[k + 1]):
                    j = col[q]
                    if count[j] > 1:
                        upd_to[m] = -1 - j
                    else:
                        upd_to[m] = pos[j]
                    m += 1
            for u in range(g, h):
                k = col[keys[u] % span]
                for q in range(diag[k] + 1, row_ptr[k + 1]):
                    j = col[q]
                    if count[j] > 1:
                        sum_target[ns] = pos[j]
                        ns += 1
                    count[j] = 0
            sum_target[first:ns].sort()
            n_steps += 1
            div_ptr[n_steps] = nd
            sum_ptr[n_steps] = ns
            g = h
        for e in range(r0, r1):
            pos[col[e]] = -1
    return (level, div_ptr[:n_steps + 1].copy(), div_entry, div_pivot, upd_to, sum_ptr[:n_steps + 1].copy(),
            sum_target[:ns].copy(), ok)


@_compiled
def _run(data, rhs, x, j_to_f, nnz, old_of_new, new_of_old,
         div_ptr, div_entry, div_pivot, col, diag, row_end, upd_to, sum_ptr, sum_target,
         fwd_ptr, fwd_target, fwd_term_ptr, fwd_l, fwd_y,
         bwd_ptr, bwd_target, bwd_term_ptr, bwd_u, bwd_y, piv_ptr, piv, piv_diag):
    n_samples, n = rhs.shape
    f = np.empty((nnz, BLOCK))
    y = np.empty((n, BLOCK))
    acc = np.zeros((n, BLOCK))  # the factorisation's open sums, by column
    sub = np.empty(BLOCK)
    for s0 in range(0, n_samples, BLOCK):  # a block of samples at a time, side by side
        nb = min(BLOCK, n_samples - s0)
        f[:] = 0.0
        y[:] = 0.0
        for e in range(j_to_f.size):
            for b in range(nb):
                f[j_to_f[e], b] = data[e, s0 + b]
        for i in range(n):
            for b in range(nb):
                y[i, b] = rhs[s0 + b, old_of_new[i]]
        # factorisation, step by step (one row's pivots of one level): divide the step's L
        # entries (i, k) by their pivots, then for each k of the step (in increasing k) and
        # each j of U's row k, the update L[i, k] U[k, j] of target (i, j). A target with this
        # one term in the step is written at once (its sum is 0.0 + the term); one with more
        # gathers them in a dense row of sums by column (0.0 where none is open), subtracted
        # and closed at the end of the step.
        m = 0
        for st in range(div_ptr.size - 1):
            p0, p1 = div_ptr[st], div_ptr[st + 1]
            for p in range(p0, p1):
                e, d = div_entry[p], div_pivot[p]
                for b in range(BLOCK):
                    f[e, b] = f[e, b] / f[d, b]
            for p in range(p0, p1):
                e = div_entry[p]
                k = col[e]
                for q in range(diag[k] + 1, row_end[k]):  # U's row k, stored in a row
                    t = upd_to[m]
                    m += 1
                    if t >= 0:
                        for b in range(BLOCK):
                            f[t, b] = f[t, b] - (0.0 + f[e, b] * f[q, b])
                    else:
                        c = -1 - t
                        for b in range(BLOCK):
                            acc[c, b] += f[e, b] * f[q, b]
            for g in range(sum_ptr[st], sum_ptr[st + 1]):
                t = sum_target[g]
                c = col[t]
                for b in range(BLOCK):
                    f[t, b] = f[t, b] - acc[c, b]
                    acc[c, b] = 0.0
        # forward substitution, level by level (the targets of one level are distinct)
        for g in range(fwd_ptr[fwd_ptr.size - 1]):
            t, q0, q1 = fwd_target[g], fwd_term_ptr[g], fwd_term_ptr[g + 1]
            for b in range(BLOCK):
                sub[b] = 0.0
            for q in range(q0, q1):
                i, j = fwd_l[q], fwd_y[q]
                for b in range(BLOCK):
                    sub[b] += f[i, b] * y[j, b]
            for b in range(BLOCK):
                y[t, b] = y[t, b] - sub[b]
        # backward substitution: per level (last first), the updates, then the divisions
        for lev in range(bwd_ptr.size - 1):
            for g in range(bwd_ptr[lev], bwd_ptr[lev + 1]):
                t, q0, q1 = bwd_target[g], bwd_term_ptr[g], bwd_term_ptr[g + 1]
                for b in range(BLOCK):
                    sub[b] = 0.0
                for q in range(q0, q1):
                    i, j = bwd_u[q], bwd_y[q]
                    for b in range(BLOCK):
                        sub[b] += f[i, b] * y[j, b]
                for b in range(BLOCK):
                    y[t, b] = y[t, b] - sub[b]
            for p in range(piv_ptr[lev], piv_ptr[lev + 1]):
                i, d = piv[p], piv_diag[p]
                for b in range(BLOCK):
                    y[i, b] = y[i, b] / f[d, b]
        for i in range(n):
            for b in range(nb):
                x[s0 + b, i] = y[new_of_old[i], b]


@_compiled
def _residual_ok(data, x_by_unknown, rhs_by_row, row_ptr, row_entries, cols, tol, ok):
    """Componentwise residual check of each sample (what ``StackedLU._residual_ok_numpy``
    computes, each row's sums in the same order): ``ok[s]`` is False unless every x is finite
    and |A x - b| <= tol (|A| |x| + |b|) + 1e-300 row by row. ``data`` (nnz, S),
    ``x_by_unknown`` (n, S), ``rhs_by_row`` (n, S)."""
    n, n_samples = rhs_by_row.shape
    for s in range(n_samples):
        ok[s] = True
    acc = np.empty(n_samples)
    acc_abs = np.empty(n_samples)
    for i in range(n):
        for s in range(n_samples):
            if not np.isfinite(x_by_unknown[i, s]):
                ok[s] = False
    for r in range(n):
        acc[:] = 0.0
        acc_abs[:] = 0.0
        for k in range(row_ptr[r], row_ptr[r + 1]):
            e = row_entries[k]
            c = cols[e]
            for s in range(n_samples):
                prod = data[e, s] * x_by_unknown[c, s]
                acc[s] += prod
                acc_abs[s] += abs(prod)
        for s in range(n_samples):
            res = acc[s] - rhs_by_row[r, s]
            scale = acc_abs[s] + abs(rhs_by_row[r, s])
            if not abs(res) <= tol * scale + 1e-300:
                ok[s] = False


def residual_ok(data: np.ndarray, x: np.ndarray, rhs: np.ndarray, row_ptr, row_entries, cols,
                tol: float) -> np.ndarray:
    """(S,) bool: see :func:`_residual_ok`; ``data`` (nnz, S), ``x`` and ``rhs`` (S, n)."""
    ok = np.empty(rhs.shape[0], np.bool_)
    _residual_ok(np.ascontiguousarray(data, np.float64), np.ascontiguousarray(np.asarray(x, np.float64).T),
                 np.ascontiguousarray(np.asarray(rhs, np.float64).T), row_ptr, row_entries, cols, float(tol), ok)
    return ok


def run(prog: Program, data: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve every sample: ``data`` (nnz of the pattern, S), ``rhs`` (S, n); returns x (S, n)."""
    rhs = np.ascontiguousarray(rhs, dtype=np.float64)
    x = np.empty_like(rhs)
    # numba reads this setting when it compiles (on the first call with these argument types,
    # unless its on-disk cache has the code); it is restored at once
    before = _numba_config.SLP_VECTORIZE
    _numba_config.SLP_VECTORIZE = 1
    try:
        _run(np.ascontiguousarray(data, np.float64), rhs, x, prog.j_to_f, prog.nnz, prog.old_of_new, prog.new_of_old,
                prog.div_ptr, prog.div_entry, prog.div_pivot, prog.col, prog.diag, prog.row_end,
                prog.upd_to, prog.sum_ptr, prog.sum_target, prog.fwd_ptr, prog.fwd_target, prog.fwd_term_ptr, prog.fwd_l,
                prog.fwd_y, prog.bwd_ptr, prog.bwd_target, prog.bwd_term_ptr, prog.bwd_u, prog.bwd_y,
                prog.piv_ptr, prog.piv, prog.piv_diag)
    finally:
        _numba_config.SLP_VECTORIZE = before
    return x
