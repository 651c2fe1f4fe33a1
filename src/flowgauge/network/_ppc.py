"""Conversion to a PYPOWER-style case dict, for cross-checks against reference libraries
(PYPOWER, pandapower's ``converter.from_ppc``) in tests, benchmarks and tools.

Needs no PYPOWER import: the result is a dict of numpy arrays in the published column layout
(bus 13 columns, gen 21, branch 13, gencost polynomial with 3 coefficients).
"""

from __future__ import annotations

import numpy as np

from ._model import Network

__all__ = ["to_ppc"]


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
