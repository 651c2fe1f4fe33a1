"""The DC approximation: susceptance matrices and power transfer distribution factors.

Lossless branches, flat voltage magnitudes, small angle differences (common practice): the
branch flow is ``b (Va_f - Va_t - shift)`` with ``b = 1 / (x tap)``. Out-of-service branches
carry nothing. Per unit and radians.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ..network._model import Network

__all__ = ["dc_matrices", "ptdf"]


def dc_matrices(net: Network) -> tuple[sp.csr_matrix, sp.csr_matrix, np.ndarray, np.ndarray]:
    """Susceptance matrices of the DC approximation.

    Returns ``(bbus, bf, pbusinj, pfinj)``: ``bbus`` (n_bus, n_bus) and ``bf`` (n_branch, n_bus)
    sparse CSR [p.u.], so that the bus injections are ``bbus @ va + pbusinj`` and the
    from-end branch flows ``bf @ va + pfinj`` [p.u.], ``va`` [rad]; ``pbusinj`` (n_bus,) and
    ``pfinj`` (n_branch,) are the injections equivalent to the phase shifters [p.u.].
    """
    nb, nl = net.n_bus, net.n_branch
    on = np.asarray(net.in_service, bool).astype(float)
    tap = np.where(net.tap == 0.0, 1.0, net.tap)
    b = on / (net.x_pu * tap)
    rows = np.r_[np.arange(nl), np.arange(nl)]
    cols = np.r_[net.f_idx, net.t_idx]
    cft = sp.csr_matrix((np.r_[np.ones(nl), -np.ones(nl)], (rows, cols)), shape=(nl, nb))
    bf = sp.csr_matrix((np.r_[b, -b], (rows, cols)), shape=(nl, nb))
    bbus = (cft.T @ bf).tocsr()
    pfinj = -b * np.deg2rad(net.shift_deg)
    pbusinj = cft.T @ pfinj
    return bbus, bf, pbusinj, pfinj


def ptdf(net: Network) -> np.ndarray:
    """Power transfer distribution factors, dense, shape (n_branch, n_bus) [p.u./p.u.].

    Entry (l, k): the change of the from-end flow of branch l when bus k injects one more
    unit and the reference bus of its island takes it back. Columns of reference buses are 0.
    """
    bbus, bf, _, _ = dc_matrices(net)
    nonref = np.setdiff1d(np.arange(net.n_bus), net.ref_idx)
    out = np.zeros((net.n_branch, net.n_bus))
    if nonref.size:
        lu = spla.splu(sp.csc_matrix(bbus[nonref][:, nonref].T))
        rhs = np.asarray(bf[:, nonref].T.todense())
        out[:, nonref] = lu.solve(rhs).T
    return out
