"""AC optimal power flow: :class:`ACOPF` (prepared once per network, solved per loading)."""

from __future__ import annotations

import time
from dataclasses import replace

import numpy as np

from ..errors import InputError
from ..network._model import Network
from ._acmodel import ACModel
from ._pdipm import interior_point
from ._report import multipliers_of, point_report
from ._result import LoadabilityResult, OPFResult, check_costs, check_loads
from ._settings import STATUS_MESSAGES, OPFSettings

__all__ = ["ACOPF", "solve_acopf", "start_vector"]


def start_vector(model: ACModel, start) -> np.ndarray:
    """The solver's variable vector from a previous result's operating point."""
    if not isinstance(start, (OPFResult, LoadabilityResult)):
        raise InputError(f"expected an OPFResult (warm start) or None, got {type(start).__name__}",
                         where="start")
    nb, ng, base = model.nb, model.ng, model.base
    arrays = (start.va_deg, start.vm_pu, start.pg_mw, start.qg_mvar)
    if any(np.shape(a) != (n,) for a, n in zip(arrays, (nb, nb, ng, ng))):
        raise InputError(f"the start point does not belong to network '{model.net.name}' "
                         f"({nb} buses, {ng} generators)", where="start")
    full = model.const.copy()
    full[:nb] = np.deg2rad(start.va_deg)
    full[nb:2 * nb] = start.vm_pu
    full[model.i_pg:model.i_pg + ng] = start.pg_mw / base
    full[model.i_qg:model.i_qg + ng] = start.qg_mvar / base
    if model.loadability:
        full[model.i_lam] = getattr(start, "lam", 0.0)
    full[model.fixed_mask] = model.const[model.fixed_mask]
    return full[model.free]


class ACOPF:
    """The AC optimal power flow of one network, prepared once (admittances, index maps,
    sparsity pattern) and solved for any loading.

    ``ACOPF(net, settings).solve(pd_mw, qd_mvar, start)``: loads shape (n_load,) [MW], [MVAr]
    (None: the network's own); ``start``: a previous :class:`OPFResult` to start from (warm
    start) or None (start at mid-range values; if that run stops without converging, a second
    run starts from the network's own voltages with the iterations left of ``max_iter``, and
    ``iterations`` counts both). Returns an :class:`OPFResult`; a loading the
    network cannot carry gives status "infeasible" or "iteration_limit", never an exception.
    """

    def __init__(self, net: Network, settings: OPFSettings | None = None):
        check_costs(net)
        self.net = net
        self.settings = settings or OPFSettings()
        self.model = ACModel(net, cost_scale=self.settings.cost_scale)

    def solve(self, pd_mw=None, qd_mvar=None, start: OPFResult | None = None) -> OPFResult:
        net, model, st = self.net, self.model, self.settings
        pd = check_loads(net, pd_mw, "pd_mw", net.pd_mw)
        qd = check_loads(net, qd_mvar, "qd_mvar", net.qd_mvar)
        model.set_loads(pd, qd)
        x0 = model.start_point() if start is None else start_vector(model, start)
        t0 = time.perf_counter()
        out = interior_point(model, x0, st)
        iterations = out.iterations
        if start is None and out.status != "converged" and iterations < st.max_iter:
            # a mid-range flat start can be far from any balanced point (near-zero impedance
            # tapped branches carry enormous flows there): run once more from the network's
            # own voltages with the iterations left; a run that converges from the first
            # start is never repeated
            out = interior_point(model, model.own_point(), replace(st, max_iter=st.max_iter - iterations))
            iterations += out.iterations
        seconds = time.perf_counter() - t0
        rep = point_report(model, out.x, st.binding_tol)
        base = model.base
        cs = model.cost_scale
        lam = out.lam / cs
        return OPFResult(
            status=out.status, message=STATUS_MESSAGES[out.status], objective=out.f / cs,
            pg_mw=rep.pg_mw, qg_mvar=rep.qg_mvar, vm_pu=rep.vm_pu, va_deg=rep.va_deg,
            lmp_per_mwh=lam[:model.nb] / base, lmq_per_mvarh=lam[model.nb:] / base,
            multipliers=multipliers_of(model, out), iterations=iterations, seconds=seconds,
            max_p_mismatch_mw=rep.max_p_mismatch_mw, max_q_mismatch_mvar=rep.max_q_mismatch_mvar,
            max_limit_violation=rep.max_limit_violation, complementarity=out.complementarity,
            dual_infeasibility=out.gradient, binding=rep.binding, signature=rep.signature,
            violations=rep.violations, pd_mw=pd, qd_mvar=qd)


def solve_acopf(net: Network, pd_mw=None, qd_mvar=None, settings: OPFSettings | None = None,
                start: OPFResult | None = None) -> OPFResult:
    """Solve the AC optimal power flow of ``net`` once (see :class:`ACOPF`)."""
    return ACOPF(net, settings).solve(pd_mw, qd_mvar, start)
