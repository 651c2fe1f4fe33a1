"""Conversion to a PYPOWER-style case dict, for cross-checks against reference libraries
(PYPOWER, pandapower's ``converter.from_ppc``) in tests, benchmarks and tools.

Needs no PYPOWER import: the result is a dict of numpy arrays in the published column layout
(bus 13 columns, gen 21, branch 13, gencost polynomial with 3 coefficients).
"""

from __future__ import annotations

import numpy as np

from ._model import Network

__all__ = ["to_ppc", "to_ppc_for_pandapower"]


def to_ppc(net: Network, pd_mw: np.ndarray | None = None, qd_mvar: np.ndarray | None = None) -> dict:
    """The network (optionally with other loads, shape (n_load,) [MW], [MVAr]) as a case dict.

    Loads sharing a bus are summed into the bus's Pd/Qd. Rate NaN (no limit) becomes 0.
    """
    pd = net.pd_mw if pd_mw is None else np.asarray(pd_mw, float)
    qd = net.qd_mvar if qd_mvar is None else np.asarray(qd_mvar, float)
    nb, ng, nl = net.n_bus, net.n_gen, net.n_branch
    bus = np.zeros((nb, 13))
    bus[:, 0] = net.bus_id
    bus[:, 1] = net.bus_type
    bus[:, 2] = np.bincount(net.load_bus_idx, weights=pd, minlength=nb)
    bus[:, 3] = np.bincount(net.load_bus_idx, weights=qd, minlength=nb)
    bus[:, 4] = net.gs_mw
    bus[:, 5] = net.bs_mvar
    bus[:, 6] = 1
    bus[:, 7] = net.vm_pu
    bus[:, 8] = net.va_deg
    bus[:, 9] = net.base_kv
    bus[:, 10] = 1
    bus[:, 11] = net.vmax_pu
    bus[:, 12] = net.vmin_pu
    gen = np.zeros((ng, 21))
    gen[:, 0] = net.gen_bus
    gen[:, 1] = net.pg_mw
    gen[:, 2] = net.qg_mvar
    gen[:, 3] = net.qmax_mvar
    gen[:, 4] = net.qmin_mvar
    gen[:, 5] = net.vg_pu
    gen[:, 6] = net.base_mva
    gen[:, 7] = 1
    gen[:, 8] = net.pmax_mw
    gen[:, 9] = net.pmin_mw
    branch = np.zeros((nl, 13))
    branch[:, 0] = net.from_bus
    branch[:, 1] = net.to_bus
    branch[:, 2] = net.r_pu
    branch[:, 3] = net.x_pu
    branch[:, 4] = net.b_pu
    rate = np.where(np.isfinite(net.rate_mva), net.rate_mva, 0.0)
    branch[:, 5:8] = rate[:, None]
    branch[:, 8] = np.where(net.tap == 1.0, 0.0, net.tap)
    branch[:, 9] = net.shift_deg
    branch[:, 10] = np.asarray(net.in_service, float)
    branch[:, 11] = net.angmin_deg
    branch[:, 12] = net.angmax_deg
    gencost = np.zeros((ng, 7))
    gencost[:, 0] = 2
    gencost[:, 3] = 3
    gencost[:, 4] = np.nan_to_num(net.cost_c2)
    gencost[:, 5] = np.nan_to_num(net.cost_c1)
    gencost[:, 6] = np.nan_to_num(net.cost_c0)
    return {"version": "2", "baseMVA": float(net.base_mva), "bus": bus, "gen": gen, "branch": branch,
            "gencost": gencost}


def to_ppc_for_pandapower(net: Network, pd_mw: np.ndarray | None = None,
                          qd_mvar: np.ndarray | None = None) -> dict:
    """:func:`to_ppc`, written so that pandapower's ``converter.from_ppc`` keeps the case.

    pandapower puts a transformer's off-nominal tap on its higher-voltage side; the case data
    (PYPOWER convention) put it at the branch's from end. A tapped branch whose from bus has the
    lower base voltage is therefore written reversed: impedance times tap^2, charging over
    tap^2, tap 1/tap, shift negated, which is the same branch admittance matrix (hand: the
    from-end self admittance (y + jb/2)/t^2 becomes the new to-end's y' + jb'/2 = (y + jb/2)/t^2,
    the mutual -y/t becomes -y'/t' = -(y/t^2) t). Buses without a base voltage get 100 kV
    (pandapower needs a voltage level). Run pandapower with ``trafo_model="pi"``, the case
    data's model.
    """
    ppc = to_ppc(net, pd_mw, qd_mvar)
    ppc["bus"][:, 9] = np.where(ppc["bus"][:, 9] > 0, ppc["bus"][:, 9], 100.0)
    br = ppc["branch"]
    kv = dict(zip(ppc["bus"][:, 0], ppc["bus"][:, 9]))
    flip = (br[:, 8] != 0) & (np.array([kv[b] for b in br[:, 0]]) < np.array([kv[b] for b in br[:, 1]]))
    tap = br[flip, 8]
    br[flip, 0], br[flip, 1] = br[flip, 1].copy(), br[flip, 0].copy()
    br[flip, 2] *= tap ** 2
    br[flip, 3] *= tap ** 2
    br[flip, 4] /= tap ** 2
    br[flip, 8] = 1.0 / tap
    br[flip, 9] *= -1.0
    return ppc
