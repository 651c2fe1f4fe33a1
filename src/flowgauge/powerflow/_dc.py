"""DC power flow, single or stacked samples; also the DC start angles of the AC solver."""

from __future__ import annotations

import numpy as np

from ..network._model import Network
from ._prepare import Prepared, prepared, stack_input
from ._result import DCPowerFlowResult

__all__ = ["solve_dc_powerflow", "dc_angles", "reference_pg"]


def dc_angles(p: Prepared, p_spec: np.ndarray, va_ref: np.ndarray) -> np.ndarray:
    """Bus angles of the DC power flow, shape (S, n_bus) [rad].

    ``p_spec``: specified active injection (generation - load), (S, n_bus) [p.u.];
    ``va_ref``: reference-bus angles, (S, n_ref) [rad].
    """
    net = p.net
    pbus = p_spec - p.pbusinj - net.gs_mw / net.base_mva
    va = np.zeros(p_spec.shape)
    va[:, p.ref] = va_ref
    nr = p.nonref
    if nr.size:
        rhs = pbus[:, nr] - (p.bbus[nr][:, p.ref] @ va_ref.T).T
        va[:, nr] = _solve_columns(p.dc_lu(), np.asfortranarray(rhs.T)).T
    return va


# Right-hand sides per SuperLU call. SuperLU's solve with many right-hand sides at once is slow
# (about 76 ms for 64 on activsg2000's 1,999 x 1,999 matrix, against 3 ms in groups of 16), and
# gives, column by column, the same bits in groups of any size from 2 up; one column alone takes
# another path (other bits), so a last group of one joins the group before it.
SOLVE_COLUMNS = 16


def _solve_columns(lu, b: np.ndarray) -> np.ndarray:
    """``lu.solve(b)`` for ``b`` (n, S), in groups of :data:`SOLVE_COLUMNS` columns."""
    s = b.shape[1]
    if s <= SOLVE_COLUMNS + 1:
        return lu.solve(b)
    starts = list(range(0, s, SOLVE_COLUMNS))
    if s - starts[-1] == 1:
        starts.pop()
    ends = starts[1:] + [s]
    return np.concatenate([lu.solve(np.asfortranarray(b[:, i:j])) for i, j in zip(starts, ends)], axis=1)


def reference_pg(p: Prepared, pg_mw: np.ndarray, p_inj_mw: np.ndarray, pd_bus_mw: np.ndarray) -> np.ndarray:
    """``pg_mw`` (S, n_gen) with the first generator of each reference bus taking the balance.

    ``p_inj_mw``: active injection into the network at each bus (S, n_bus) [MW];
    ``pd_bus_mw``: load at each bus (S, n_bus) [MW].
    """
    pg = pg_mw.copy()
    has = p.ref_gen >= 0
    rb, rg = p.ref[has], p.ref_gen[has]
    others = (p.adm.cg @ pg.T).T[:, rb] - pg[:, rg]
    pg[:, rg] = p_inj_mw[:, rb] + pd_bus_mw[:, rb] - others
    return pg


def solve_dc_powerflow(net: Network, pd_mw=None, pg_mw=None) -> DCPowerFlowResult:
    """DC power flow of ``net`` with loads ``pd_mw`` and generator setpoints ``pg_mw``.

    ``pd_mw``: shape (n_load,) or (n_samples, n_load) [MW], default ``net.pd_mw``;
    ``pg_mw``: (n_gen,) or (n_samples, n_gen) [MW], default ``net.pg_mw``; the first
    generator at each reference bus takes the balance. Reference angles come from
    ``net.va_deg``. Returns a :class:`DCPowerFlowResult`, stacked when an input is 2-D.
    """
    p = prepared(net)
    n_s = None
    for x in (pd_mw, pg_mw):
        if x is not None and np.ndim(x) == 2:
            n_s = int(np.shape(x)[0])
    pd = _dc_input("pd_mw", pd_mw, net.pd_mw, net.n_load, n_s)
    pg = _dc_input("pg_mw", pg_mw, net.pg_mw, net.n_gen, n_s)
    base = net.base_mva
    p_spec = ((p.adm.cg @ pg.T) - (p.adm.cl @ pd.T)).T / base
    va_ref = np.broadcast_to(np.deg2rad(net.va_deg[p.ref]), (p_spec.shape[0], p.ref.size))
    va = dc_angles(p, p_spec, va_ref)
    pf = ((p.bf @ va.T).T + p.pfinj) * base
    p_inj = ((p.bbus @ va.T).T + p.pbusinj + net.gs_mw / base) * base
    pd_bus = (p.adm.cl @ pd.T).T
    pg_out = reference_pg(p, pg, p_inj, pd_bus)
    p_ref = p_inj[:, p.ref] + pd_bus[:, p.ref]
    out = DCPowerFlowResult(va_deg=np.rad2deg(va), pf_mw=pf, pg_mw=pg_out, p_ref_mw=p_ref)
    if n_s is None:
        out = DCPowerFlowResult(va_deg=out.va_deg[0], pf_mw=out.pf_mw[0], pg_mw=out.pg_mw[0],
                                p_ref_mw=out.p_ref_mw[0])
    return out


def _dc_input(name, value, default, n, n_s):
    if value is not None and np.ndim(value) == 1:  # one vector for all samples
        arr = stack_input(name, value, default, n, None)
        return np.broadcast_to(arr, (n_s or 1, n)).copy()
    return stack_input(name, value, default, n, n_s)
