"""The LU vectorised across samples, checked against SciPy's SuperLU (scipy.sparse.linalg.spsolve)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse.linalg as spla

from flowgauge.network import load_network
from flowgauge.powerflow._newton import LINEAR_SOLVERS, stacked_lu
from flowgauge.powerflow._prepare import prepared


@pytest.fixture(scope="module", params=["ieee14", "ieee300", "synthetic2000"])
def pattern(request):
    if request.param == "synthetic2000":  # large enough for long chains of fill-in
        from flowgauge.network import synthetic
        net = synthetic(2000, 1)
    else:
        net = load_network(request.param)
    p = prepared(net)
    return net, p, p.pattern(p.pv, p.pq)


def _jacobians(net, p, pat, n, seed):
    rng = np.random.default_rng(seed)
    vm = rng.uniform(0.95, 1.05, (n, net.n_bus))
    va = rng.uniform(-0.2, 0.2, (n, net.n_bus))
    e = np.exp(1j * va)
    return pat.values(vm, e, (p.adm.ybus @ (vm * e).T).T), rng.standard_normal((n, pat.n))


def test_matches_superlu(pattern):
    net, p, pat = pattern
    data, rhs = _jacobians(net, p, pat, 5, 3)
    x, ok = stacked_lu(pat).solve(data, rhs)
    assert ok.all()
    for k in range(5):
        expected = spla.spsolve(pat.matrix(data[k]), rhs[k])  # source: SciPy SuperLU with partial pivoting
        np.testing.assert_allclose(x[k], expected, rtol=1e-9, atol=1e-11)


def test_singular_sample_is_reported_and_others_solved(pattern):
    net, p, pat = pattern
    data, rhs = _jacobians(net, p, pat, 3, 4)
    data[1] = 0.0  # an all-zero Jacobian is singular (common practice)
    x, ok = stacked_lu(pat).solve(data, rhs)
    assert ok.tolist() == [True, False, True]
    dx, singular = LINEAR_SOLVERS["stacked"](pat, data.T, rhs)  # solvers take values by entry
    assert singular.tolist() == [False, True, False]
    np.testing.assert_allclose(dx[2], spla.spsolve(pat.matrix(data[2]), rhs[2]), rtol=1e-9, atol=1e-11)


def test_compiled_kernel_gives_the_vectorised_bits(pattern):
    # the compiled kernel must reproduce the numpy schedule exactly, or frozen scorecards change
    net, p, pat = pattern
    data, rhs = _jacobians(net, p, pat, 7, 5)
    data[3] = 0.0  # a singular sample: both give the same inf/nan pattern
    lu = stacked_lu(pat)
    by_entry = np.ascontiguousarray(data.T)
    x, ok = lu.solve_by_entry(by_entry, rhs)
    x_ref, ok_ref = lu.solve_by_entry_numpy(by_entry, rhs)
    assert ok.tolist() == ok_ref.tolist()
    assert x.tobytes() == x_ref.tobytes()
    assert not ok[3]


@pytest.mark.parametrize("columns", [1, 2, 17, 18, 33, 49, 64])
def test_dc_start_in_groups_gives_the_bits_of_one_solve(columns):
    # SuperLU's solve (scipy.sparse.linalg.splu) of all right-hand sides at once is the reference
    from flowgauge.powerflow._dc import _solve_columns
    net = load_network("ieee300")
    p = prepared(net)
    lu = p.dc_lu()
    b = np.asfortranarray(np.random.default_rng(columns).standard_normal((lu.shape[0], columns)))
    assert _solve_columns(lu, b).tobytes() == lu.solve(b).tobytes() == lu.solve(np.ascontiguousarray(b)).tobytes()


def test_filled_pattern_is_the_fill_of_symbolic_elimination(pattern):
    # the definition (common practice): eliminating pivots in index order, (i, j) fills when
    # some k < min(i, j) has (i, k) and (j, k); computed here as the fixed point of sparse
    # products over the permuted pattern, and compared with the compiled tree walk
    import scipy.sparse as sp

    from flowgauge.powerflow._stacked_lu import _filled_lower

    net, p, pat = pattern
    lu = stacked_lu(pat)
    jcol = np.repeat(np.arange(pat.n), np.diff(pat.indptr))
    r, c = lu.new_of_old[pat.indices], lu.new_of_old[jcol]
    lo, hi = np.maximum(r, c), np.minimum(r, c)
    keep = lo != hi
    low = sp.csr_matrix((np.ones(int(keep.sum())), (lo[keep], hi[keep])), shape=(pat.n, pat.n))
    low.data[:] = 1.0
    while True:
        grown = low + sp.tril(low @ low.T, -1)
        grown.data[:] = 1.0
        if grown.nnz == low.nnz:
            break
        low = grown
    ref = low.tocoo()
    got_r, got_c = _filled_lower(pat.n, r, c)
    assert got_r.size == ref.nnz
    assert np.array_equal(np.sort(got_r * pat.n + got_c), np.sort(ref.row.astype(np.int64) * pat.n + ref.col))
    assert np.all(got_r > got_c)
