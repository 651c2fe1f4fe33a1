"""Bus admittance matrix and branch end admittances (per unit, sparse).

Branch model: the standard pi model with a series impedance r + jx, total line charging b
split half at each end, and an ideal transformer of complex ratio tap * exp(j shift) at the
from end (common practice; the same model as the IEEE Common Data Format describes).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..network._model import Network

__all__ = ["Admittance", "admittance"]


@dataclass(frozen=True, eq=False)
class Admittance:
    """Sparse admittance data of a network, in per unit.

    ``ybus`` (n_bus, n_bus); ``yf``, ``yt`` (n_branch, n_bus) give the complex current into
    each branch at its from and to end from the bus voltages; ``cf``, ``ct`` (n_branch, n_bus)
    are branch-bus incidence matrices; ``cg`` (n_bus, n_gen) and ``cl`` (n_bus, n_load) map
    generators and loads to buses. Out-of-service branches have zero rows in ``yf``/``yt``.
    ``yff, yft, ytf, ytt`` (n_branch,) are the branch two-port entries.
    """

    ybus: sp.csr_matrix
    yf: sp.csr_matrix
    yt: sp.csr_matrix
    cf: sp.csr_matrix
    ct: sp.csr_matrix
    cg: sp.csr_matrix
    cl: sp.csr_matrix
    yff: np.ndarray
    yft: np.ndarray
    ytf: np.ndarray
    ytt: np.ndarray
    ysh: np.ndarray


def admittance(net: Network) -> Admittance:
    """Build the admittance data of ``net`` (vectorised; no loop over branches)."""
    nb, nl = net.n_bus, net.n_branch
    on = np.asarray(net.in_service, bool).astype(float)
    ys = on / (net.r_pu + 1j * net.x_pu)
    bc = on * net.b_pu
    tap = np.where(net.tap == 0.0, 1.0, net.tap) * np.exp(1j * np.deg2rad(net.shift_deg))
    ytt = ys + 1j * bc / 2
    yff = ytt / (tap * np.conj(tap))
    yft = -ys / np.conj(tap)
    ytf = -ys / tap
    ysh = (net.gs_mw + 1j * net.bs_mvar) / net.base_mva

    f, t = net.f_idx, net.t_idx
    rows = np.arange(nl)
    cf = sp.csr_matrix((np.ones(nl), (rows, f)), shape=(nl, nb))
    ct = sp.csr_matrix((np.ones(nl), (rows, t)), shape=(nl, nb))
    yf = sp.csr_matrix((np.r_[yff, yft], (np.r_[rows, rows], np.r_[f, t])), shape=(nl, nb))
    yt = sp.csr_matrix((np.r_[ytf, ytt], (np.r_[rows, rows], np.r_[f, t])), shape=(nl, nb))
    ybus = (cf.T @ yf + ct.T @ yt + sp.diags(ysh)).tocsr()
    ybus.sum_duplicates()
    ng, nd = net.n_gen, net.n_load
    cg = sp.csr_matrix((np.ones(ng), (net.gen_bus_idx, np.arange(ng))), shape=(nb, ng))
    cl = sp.csr_matrix((np.ones(nd), (net.load_bus_idx, np.arange(nd))), shape=(nb, nd))
    return Admittance(ybus=ybus, yf=yf, yt=yt, cf=cf, ct=ct, cg=cg, cl=cl,
                      yff=yff, yft=yft, ytf=ytf, ytt=ytt, ysh=ysh)
