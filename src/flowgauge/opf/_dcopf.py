"""DC optimal power flow: the linearised (lossless, flat-voltage, small-angle) dispatch with the
same generator costs and limits, thermal limits applied to the DC branch flows in MW, solved
as a convex quadratic program by the project's interior-point method."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from ..network._model import Network
from ..physics._dc import dc_matrices
from ._pdipm import interior_point
from ._result import LIMIT_NAMES, binding_signature, check_costs, check_loads
from ._settings import STATUS_MESSAGES, OPFSettings

__all__ = ["DCOPFResult", "solve_dcopf", "QuadraticProblem"]

_NO_ANGLE_LIMIT_DEG = 360.0


@dataclass(frozen=True, eq=False)
class DCOPFResult:
    """Outcome of a DC optimal power flow.

    ``status``/``message`` from the status table; ``objective`` [$/h]; ``pg_mw`` (n_gen,);
    ``va_deg`` (n_bus,); ``flow_mw`` (n_branch,) from-end DC flows; ``lmp_per_mwh`` (n_bus,);
    ``multipliers``: ``pmin``/``pmax`` (n_gen,) [$/MWh], ``rate_from`` (flow <= rate) and
    ``rate_to`` (-flow <= rate) (n_branch,) [$/MWh], ``angmin``/``angmax`` (n_branch,) [$/h per
    degree]; ``iterations``, ``seconds``, ``max_p_mismatch_mw``, ``max_limit_violation``
    (MW or degrees), ``binding``/``signature`` as for the AC result (``rate_from`` / ``rate_to``
    name the flow direction at its limit). ``pd_mw``: the loads solved for.
    """

    status: str
    message: str
    objective: float
    pg_mw: np.ndarray
    va_deg: np.ndarray
    flow_mw: np.ndarray
    lmp_per_mwh: np.ndarray
    multipliers: dict[str, np.ndarray]
    iterations: int
    seconds: float
    max_p_mismatch_mw: float
    max_limit_violation: float
    binding: tuple[str, ...]
    signature: str
    pd_mw: np.ndarray | None = field(default=None)

    @property
    def converged(self) -> bool:
        return self.status == "converged"


class QuadraticProblem:
    """``min 1/2 x'Hx + c'x + c0`` s.t. ``A_eq x = b_eq``, ``A_in x <= b_in``, bounds; the
    :class:`~flowgauge.opf._pdipm.Problem` interface with explicit sparse matrices."""

    def __init__(self, hess, c, c0, a_eq, b_eq, a_in, b_in, lower, upper):
        self.hess, self.c, self.c0 = sp.csr_matrix(hess), np.asarray(c, float), float(c0)
        self.a_eq, self.b_eq = sp.csr_matrix(a_eq), np.asarray(b_eq, float)
        self.a_in, self.b_in = sp.csr_matrix(a_in), np.asarray(b_in, float)
        self.a_in_t = self.a_in.T.tocsr()
        self.x_lower, self.x_upper = np.asarray(lower, float), np.asarray(upper, float)
        self.n_x, self.n_eq, self.n_ineq = self.c.size, self.b_eq.size, self.b_in.size

    def evaluate(self, x):
        self.x = x
        f = 0.5 * x @ (self.hess @ x) + self.c @ x + self.c0
        return float(f), self.a_eq @ x - self.b_eq, self.a_in @ x - self.b_in

    def grad_lagrangian(self, lam, mu):
        return self.hess @ self.x + self.c + self.a_eq.T @ lam + self.a_in_t @ mu

    def jac_h(self, v):
        return self.a_in @ v

    def jac_h_t(self, w):
        return self.a_in_t @ w

    def kkt_matrix(self, lam, mu, d_h, d_x, reg):
        m = self.hess + self.a_in_t @ sp.diags(d_h) @ self.a_in + sp.diags(d_x)
        return sp.bmat([[m, self.a_eq.T], [self.a_eq, -reg * sp.identity(self.n_eq)]], format="csc")


def _dc_problem(net: Network, pd_mw: np.ndarray, cost_scale: float):
    nb, ng, base = net.n_bus, net.n_gen, float(net.base_mva)
    bbus, bf, pbusinj, pfinj = dc_matrices(net)
    cg = sp.csr_matrix((np.ones(ng), (net.gen_bus_idx, np.arange(ng))), shape=(nb, ng))
    pd_bus = np.bincount(net.load_bus_idx, weights=pd_mw, minlength=nb) / base + net.gs_mw / base
    # full variables [va (nb), pg (ng)]; reference angles and equal-bound outputs are fixed
    lower = np.r_[np.full(nb, -np.inf), net.pmin_mw / base]
    upper = np.r_[np.full(nb, np.inf), net.pmax_mw / base]
    fixed = lower == upper
    fixed[net.ref_idx] = True
    const = np.where(fixed, lower, 0.0)
    const[net.ref_idx] = np.deg2rad(net.va_deg[net.ref_idx])
    free = np.flatnonzero(~fixed)
    a_full = sp.hstack([bbus, -cg]).tocsr()
    b_eq = -(pbusinj + pd_bus) - a_full[:, fixed] @ const[fixed]
    on = np.asarray(net.in_service, bool)
    rate = net.rate_mva / base
    lim = np.flatnonzero(on & np.isfinite(rate) & (rate > 0))
    amin_br = np.flatnonzero(on & (net.angmin_deg > -_NO_ANGLE_LIMIT_DEG))
    amax_br = np.flatnonzero(on & (net.angmax_deg < _NO_ANGLE_LIMIT_DEG))
    br = np.arange(net.n_branch)
    cft = sp.csr_matrix((np.r_[np.ones(br.size), -np.ones(br.size)], (np.r_[br, br], np.r_[net.f_idx, net.t_idx])),
                        shape=(br.size, nb))
    zg = sp.csr_matrix((0, ng))
    rows_in = [sp.hstack([bf[lim], sp.csr_matrix((lim.size, ng))]),
               sp.hstack([-bf[lim], sp.csr_matrix((lim.size, ng))]),
               sp.hstack([-cft[amin_br], sp.csr_matrix((amin_br.size, ng))]),
               sp.hstack([cft[amax_br], sp.csr_matrix((amax_br.size, ng))])]
    a_in_full = sp.vstack(rows_in + [sp.hstack([sp.csr_matrix((0, nb)), zg])]).tocsr()  # keeps the width when empty
    b_in = np.r_[rate[lim] - pfinj[lim], rate[lim] + pfinj[lim],
                 -np.deg2rad(net.angmin_deg[amin_br]), np.deg2rad(net.angmax_deg[amax_br])]
    b_in = b_in - a_in_full[:, fixed] @ const[fixed]
    c2 = np.r_[np.zeros(nb), 2 * net.cost_c2 * base**2] * cost_scale
    c1 = np.r_[np.zeros(nb), net.cost_c1 * base] * cost_scale
    # fixed variables add constants (the Hessian is diagonal, so no cross terms)
    c0 = float(np.sum(net.cost_c0)) * cost_scale + 0.5 * const @ (c2 * const) + c1 @ const
    prob = QuadraticProblem(sp.diags(c2[free]), c1[free], c0, a_full[:, free], b_eq,
                            a_in_full[:, free], b_in, lower[free], upper[free])
    parts = {"lim": lim, "amin": amin_br, "amax": amax_br, "free": free, "const": const, "fixed": fixed,
             "a_full": a_full, "pd_bus": pd_bus, "pbusinj": pbusinj, "bf": bf, "pfinj": pfinj, "c2": c2,
             "c1": c1}
    return prob, parts


def _dc_multipliers(net: Network, p: dict, out, cs: float) -> dict[str, np.ndarray]:
    nb, base, nl = net.n_bus, float(net.base_mva), net.n_branch
    lim, amin, amax = p["lim"], p["amin"], p["amax"]
    n1, n2 = lim.size, 2 * lim.size
    mu = out.mu / cs
    mult = {"pmin": np.zeros(net.n_gen), "pmax": np.zeros(net.n_gen)}
    is_gen = p["free"] >= nb
    mult["pmin"][p["free"][is_gen] - nb] = out.mu_lower[is_gen] / cs / base
    mult["pmax"][p["free"][is_gen] - nb] = out.mu_upper[is_gen] / cs / base
    per_degree = np.rad2deg(1.0)
    for name, idx, vals, scale in (("rate_from", lim, mu[:n1], base), ("rate_to", lim, mu[n1:n2], base),
                                   ("angmin", amin, mu[n2:n2 + amin.size], per_degree),
                                   ("angmax", amax, mu[n2 + amin.size:], per_degree)):
        arr = np.zeros(nl)
        arr[idx] = vals / scale
        mult[name] = arr
    return mult


def _dc_binding(net: Network, p: dict, pg_pu, flow_mw, dang_deg, tol: float) -> tuple[str, ...]:
    """Binding-limit labels, sorted as for the AC result (kind, id, limit)."""
    base, lim, amin, amax = float(net.base_mva), p["lim"], p["amin"], p["amax"]
    near = np.abs(flow_mw[lim]) >= net.rate_mva[lim] * (1.0 - tol)
    groups = [
        (1, net.gen_id[pg_pu - net.pmin_mw / base <= tol], "pmin"),
        (1, net.gen_id[net.pmax_mw / base - pg_pu <= tol], "pmax"),
        (2, net.branch_id[lim[near & (flow_mw[lim] > 0)]], "rate_from"),
        (2, net.branch_id[lim[near & (flow_mw[lim] <= 0)]], "rate_to"),
        (2, net.branch_id[amin[np.deg2rad(dang_deg[amin] - net.angmin_deg[amin]) <= tol]], "angmin"),
        (2, net.branch_id[amax[np.deg2rad(net.angmax_deg[amax] - dang_deg[amax]) <= tol]], "angmax"),
    ]
    kind = {1: "gen", 2: "branch"}
    order = list(LIMIT_NAMES)
    labels = [(k, int(i), order.index(lim_name), f"{kind[k]}:{int(i)}:{lim_name}")
              for k, ids, lim_name in groups for i in ids]
    return tuple(lab[3] for lab in sorted(labels))


def solve_dcopf(net: Network, pd_mw=None, settings: OPFSettings | None = None) -> DCOPFResult:
    """Solve the DC optimal power flow of ``net`` for active loads ``pd_mw`` (shape (n_load,)
    [MW]; None: the network's own). Reactive loads play no part."""
    st = settings or OPFSettings()
    check_costs(net)
    pd = check_loads(net, pd_mw, "pd_mw", net.pd_mw)
    nb, base, cs = net.n_bus, float(net.base_mva), st.cost_scale
    prob, p = _dc_problem(net, pd, cs)
    x0 = np.zeros(prob.n_x)
    mid = np.isfinite(prob.x_lower) & np.isfinite(prob.x_upper)
    x0[mid] = 0.5 * (prob.x_lower[mid] + prob.x_upper[mid])
    t0 = time.perf_counter()
    out = interior_point(prob, x0, st)
    seconds = time.perf_counter() - t0
    full = p["const"].copy()
    full[p["free"]] = out.x
    va, pg = full[:nb], full[nb:]
    flow = (p["bf"] @ va + p["pfinj"]) * base
    mismatch = (p["a_full"] @ full + p["pbusinj"] + p["pd_bus"]) * base
    lim, amin, amax = p["lim"], p["amin"], p["amax"]
    dang = np.rad2deg(va[net.f_idx] - va[net.t_idx])
    viol = [np.abs(flow[lim]) - net.rate_mva[lim], net.pmin_mw - pg * base, pg * base - net.pmax_mw,
            net.angmin_deg[amin] - dang[amin], dang[amax] - net.angmax_deg[amax]]
    binding = _dc_binding(net, p, pg, flow, dang, st.binding_tol)
    return DCOPFResult(
        status=out.status, message=STATUS_MESSAGES[out.status], objective=out.f / cs, pg_mw=pg * base,
        va_deg=np.rad2deg(va), flow_mw=flow, lmp_per_mwh=out.lam / cs / base,
        multipliers=_dc_multipliers(net, p, out, cs), iterations=out.iterations, seconds=seconds,
        max_p_mismatch_mw=float(np.max(np.abs(mismatch), initial=0.0)),
        max_limit_violation=max(0.0, *(float(np.max(v, initial=0.0)) for v in viol)),
        binding=binding, signature=binding_signature(binding), pd_mw=pd)
