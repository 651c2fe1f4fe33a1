"""Turning a solver outcome on an :class:`ACModel` into physical quantities: the operating
point, residuals, violations per limit kind, multipliers and binding-limit labels."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._acmodel import ACModel
from ._pdipm import IPOutcome
from ._result import LIMIT_NAMES, binding_signature

__all__ = ["PointReport", "point_report", "multipliers_of"]

_KIND_ORDER = {"bus": 0, "gen": 1, "branch": 2}
_LIMIT_ORDER = {name: i for i, name in enumerate(LIMIT_NAMES)}


@dataclass(frozen=True)
class PointReport:
    va_deg: np.ndarray
    vm_pu: np.ndarray
    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    max_p_mismatch_mw: float
    max_q_mismatch_mvar: float
    violations: dict[str, float]
    max_limit_violation: float
    binding: tuple[str, ...]
    signature: str


def _labels(kind: str, ids: np.ndarray, limit: str) -> list[tuple[int, int, int, str]]:
    return [(_KIND_ORDER[kind], int(i), _LIMIT_ORDER[limit], f"{kind}:{int(i)}:{limit}") for i in ids]


def point_report(model: ACModel, x: np.ndarray, tol: float) -> PointReport:
    """Physical description of the point ``x`` of ``model`` (after :meth:`ACModel.set_loads`);
    ``tol`` is the binding tolerance (p.u., fraction of rating, rad)."""
    net, nb, ng, base = model.net, model.nb, model.ng, model.base
    _, g, _ = model.evaluate(x)
    full = model.x_full
    va, vm = full[:nb], full[nb:2 * nb]
    pg, qg = full[model.i_pg:model.i_pg + ng], full[model.i_qg:model.i_qg + ng]
    lo, up = model.full_lower, model.full_upper
    sl = slice(nb, model.i_qg + ng)
    below, above = lo[sl] - full[sl], full[sl] - up[sl]  # vm, pg, qg in p.u.
    s_end = np.sqrt(model.s2)
    rate_end = 1.0 / np.sqrt(model.inv_r2)
    d_min = model.amin - (va[model.amin_f] - va[model.amin_t])
    d_max = (va[model.amax_f] - va[model.amax_t]) - model.amax
    viol_pu = np.maximum(np.maximum(below, above), 0.0)

    def vmax(a: np.ndarray) -> float:
        return float(np.max(a, initial=0.0))

    violations = {
        "vm_pu": vmax(viol_pu[:nb]),
        "pg_mw": vmax(viol_pu[nb:nb + ng]) * base,
        "qg_mvar": vmax(viol_pu[nb + ng:]) * base,
        "rate_mva": vmax(s_end - rate_end) * base,
        "angle_deg": float(np.rad2deg(max(vmax(d_min), vmax(d_max)))),
    }
    n_lim = model.lim_br.size
    near_rate = s_end >= rate_end * (1.0 - tol)
    labels = []
    for kind, ids, offset, count in (("bus", net.bus_id, 0, nb), ("gen", net.gen_id, nb, ng),
                                     ("gen", net.gen_id, nb + ng, ng)):
        names = ("vmin", "vmax") if kind == "bus" else (("pmin", "pmax") if offset == nb else ("qmin", "qmax"))
        labels += _labels(kind, ids[below[offset:offset + count] >= -tol], names[0])
        labels += _labels(kind, ids[above[offset:offset + count] >= -tol], names[1])
    labels += _labels("branch", net.branch_id[model.lim_br[near_rate[:n_lim]]], "rate_from")
    labels += _labels("branch", net.branch_id[model.lim_br[near_rate[n_lim:]]], "rate_to")
    labels += _labels("branch", net.branch_id[model.angmin_br[d_min >= -tol]], "angmin")
    labels += _labels("branch", net.branch_id[model.angmax_br[d_max >= -tol]], "angmax")
    binding = tuple(lab[3] for lab in sorted(labels))
    return PointReport(
        va_deg=np.rad2deg(va), vm_pu=vm.copy(), pg_mw=pg * base, qg_mvar=qg * base,
        max_p_mismatch_mw=float(np.max(np.abs(g[:nb]), initial=0.0)) * base,
        max_q_mismatch_mvar=float(np.max(np.abs(g[nb:]), initial=0.0)) * base,
        violations=violations, max_limit_violation=max(violations.values()),
        binding=binding, signature=binding_signature(binding))


def multipliers_of(model: ACModel, out: IPOutcome) -> dict[str, np.ndarray]:
    """Limit multipliers in physical units (see :class:`OPFResult`), unscaled by the cost
    scale. A variable fixed by equal bounds gets its reduced gradient as the multiplier of
    the bound it presses against."""
    net, nb, ng, base, cs = model.net, model.nb, model.ng, model.base, model.cost_scale
    mu_lo = np.zeros(model.n_full)
    mu_up = np.zeros(model.n_full)
    mu_lo[model.free] = out.mu_lower
    mu_up[model.free] = out.mu_upper
    model.evaluate(out.x)
    red = model.grad_lagrangian_full(out.lam, out.mu)
    fixed = model.fixed_mask.copy()
    fixed[:nb] = False  # reference angles carry no limit multiplier
    mu_lo[fixed] = np.maximum(red[fixed], 0.0)
    mu_up[fixed] = np.maximum(-red[fixed], 0.0)
    mu_lo, mu_up = mu_lo / cs, mu_up / cs
    mu_f, mu_min, mu_max = model._split_mu(out.mu / cs)
    n_lim = model.lim_br.size
    # d|S|/d(S^2/r^2) = r^2 / (2|S|): multiplier of |S| <= r in $/h per p.u., then per MVA
    s_end = np.sqrt(model.s2)
    mu_s = mu_f * 2.0 * s_end * model.inv_r2 / base
    nl = net.n_branch
    out_d = {}
    out_d["vmin"], out_d["vmax"] = mu_lo[nb:2 * nb], mu_up[nb:2 * nb]
    g0, q0 = model.i_pg, model.i_qg
    out_d["pmin"], out_d["pmax"] = mu_lo[g0:g0 + ng] / base, mu_up[g0:g0 + ng] / base
    out_d["qmin"], out_d["qmax"] = mu_lo[q0:q0 + ng] / base, mu_up[q0:q0 + ng] / base
    for name, idx, vals in (("rate_from", model.lim_br, mu_s[:n_lim]), ("rate_to", model.lim_br, mu_s[n_lim:]),
                            ("angmin", model.angmin_br, mu_min * np.pi / 180.0),
                            ("angmax", model.angmax_br, mu_max * np.pi / 180.0)):
        arr = np.zeros(nl)
        arr[idx] = vals
        out_d[name] = arr
    return out_d
