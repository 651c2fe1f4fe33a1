"""The AC optimal power flow as a sparse nonlinear program for the interior-point solver.

Variables (per unit, radians): bus voltage angles ``va`` and magnitudes ``vm``, generator
outputs ``pg`` and ``qg``, and for the loadability problem one load scale factor ``lam``.
Reference-bus angles are fixed at their network values; a variable whose two bounds are
equal is fixed too. Constraints: active and reactive balance at every bus
(``injection(V) + shunt - generation + load = 0``), apparent-power limits at both branch ends
in squared form scaled by the rating (``(P^2 + Q^2) / rate^2 - 1 <= 0``), angle-difference
limits where tighter than +-360 degrees, and voltage / generator limits as variable bounds.

All matrices are assembled into one fixed sparsity pattern, computed once per network, by a
single ``bincount`` per iteration; there is no Python loop over buses, branches or generators.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..network._model import Network
from ..physics._admittance import admittance
from ._branch_terms import end_terms

__all__ = ["ACModel"]

_NO_ANGLE_LIMIT_DEG = 360.0


class ACModel:
    """One network's AC-OPF (``loadability=False``: minimise generation cost) or maximum
    loadability problem (``loadability=True``: maximise the scale factor ``lam`` of a load
    direction). Loads are set with :meth:`set_loads` before each solve."""

    def __init__(self, net: Network, loadability: bool = False, cost_scale: float = 1.0,
                 dispatch_weight: float = 0.0):
        self.net = net
        self.loadability = loadability
        # loadability: a tiny weight on sum(pg^2 + qg^2) picks one dispatch among the many
        # that reach the same scale factor (keeps the Newton matrix nonsingular)
        self.dispatch_weight = dispatch_weight if loadability else 0.0
        nb, ng = net.n_bus, net.n_gen
        self.nb, self.ng = nb, ng
        base = float(net.base_mva)
        self.base = base
        adm = admittance(net)
        on = np.flatnonzero(np.asarray(net.in_service, bool))
        f, t = net.f_idx[on], net.t_idx[on]
        self.br_on = on
        # branch ends: from ends first, then to ends
        self.a = np.concatenate([f, t])
        self.b = np.concatenate([t, f])
        self.y_self = np.concatenate([adm.yff[on], adm.ytt[on]])
        self.y_mut = np.concatenate([adm.yft[on], adm.ytf[on]])
        self.n_end = self.a.size
        rate = net.rate_mva[on] / base
        lim = np.isfinite(rate) & (rate > 0)
        self.lim_br = on[lim]
        self.lim_end = np.concatenate([np.flatnonzero(lim), on.size + np.flatnonzero(lim)])
        self.inv_r2 = 1.0 / np.concatenate([rate[lim], rate[lim]]) ** 2
        angmin = np.deg2rad(net.angmin_deg[on])
        angmax = np.deg2rad(net.angmax_deg[on])
        has_min = net.angmin_deg[on] > -_NO_ANGLE_LIMIT_DEG
        has_max = net.angmax_deg[on] < _NO_ANGLE_LIMIT_DEG
        self.angmin_br, self.angmax_br = on[has_min], on[has_max]
        self.amin_f, self.amin_t, self.amin = f[has_min], t[has_min], angmin[has_min]
        self.amax_f, self.amax_t, self.amax = f[has_max], t[has_max], angmax[has_max]
        self.gs = adm.ysh.real
        self.bs = adm.ysh.imag
        self.gen_bus = net.gen_bus_idx
        self.load_bus = net.load_bus_idx
        self._layout(net)
        self.n_eq = 2 * nb
        self.n_ineq = self.lim_end.size + self.amin.size + self.amax.size
        self._pattern()
        self.set_loads(net.pd_mw, net.qd_mvar)
        # objective in scaled $/h (``cost_scale`` improves conditioning; undone in results)
        self.cost_scale = cost_scale
        self.cost_c2 = np.nan_to_num(net.cost_c2) * base**2 * cost_scale
        self.cost_c1 = np.nan_to_num(net.cost_c1) * base * cost_scale
        self.cost_c0 = float(np.sum(np.nan_to_num(net.cost_c0))) * cost_scale

    # ---- variable layout -------------------------------------------------------------
    def _layout(self, net: Network) -> None:
        nb, ng, base = self.nb, self.ng, self.base
        n_full = 2 * nb + 2 * ng + (1 if self.loadability else 0)
        self.n_full = n_full
        self.i_va, self.i_vm = 0, nb
        self.i_pg, self.i_qg = 2 * nb, 2 * nb + ng
        self.i_lam = 2 * nb + 2 * ng
        lower = np.concatenate([np.full(nb, -np.inf), net.vmin_pu, net.pmin_mw / base, net.qmin_mvar / base])
        upper = np.concatenate([np.full(nb, np.inf), net.vmax_pu, net.pmax_mw / base, net.qmax_mvar / base])
        if self.loadability:
            lower = np.append(lower, -np.inf)
            upper = np.append(upper, np.inf)
        fixed = lower == upper
        ref = net.ref_idx
        fixed[ref] = True
        const = np.where(fixed, lower, 0.0)
        const[ref] = np.deg2rad(net.va_deg[ref])
        self.free = np.flatnonzero(~fixed)
        self.fixed_mask = fixed
        self.const = const
        self.x_index = np.full(n_full, -1, dtype=np.int64)
        self.x_index[self.free] = np.arange(self.free.size)
        self.n_x = self.free.size
        self.x_lower = lower[self.free]
        self.x_upper = upper[self.free]
        self.full_lower, self.full_upper = lower, upper

    def full(self, x: np.ndarray) -> np.ndarray:
        out = self.const.copy()
        out[self.free] = x
        return out

    def start_point(self) -> np.ndarray:
        """Default start: all angles at the reference angle, magnitudes and generator outputs
        at the middle of their limits (scale factor 0)."""
        net = self.net
        nb = self.nb
        full = self.const.copy()
        full[:nb] = np.deg2rad(net.va_deg[net.ref_idx[0]]) if net.ref_idx.size else 0.0
        lo, up = self.full_lower[nb:], self.full_upper[nb:]
        lo_f, up_f = np.isfinite(lo), np.isfinite(up)
        mid = np.zeros(lo.size)
        both = lo_f & up_f
        mid[both] = 0.5 * (lo[both] + up[both])
        mid[lo_f & ~up_f] = lo[lo_f & ~up_f]
        mid[up_f & ~lo_f] = up[up_f & ~lo_f]
        full[nb:] = mid
        full[self.fixed_mask] = self.const[self.fixed_mask]
        return full[self.free]

    def own_point(self) -> np.ndarray:
        """Second start: the network's own bus voltages (``vm_pu`` clipped to the voltage
        limits, ``va_deg``), generator outputs as in :meth:`start_point`."""
        nb = self.nb
        full = self.full(self.start_point())
        full[:nb] = np.deg2rad(self.net.va_deg)
        full[nb:2 * nb] = np.clip(self.net.vm_pu, self.full_lower[nb:2 * nb], self.full_upper[nb:2 * nb])
        full[self.fixed_mask] = self.const[self.fixed_mask]
        return full[self.free]

    def set_loads(self, pd_mw: np.ndarray, qd_mvar: np.ndarray,
                  dir_pd_mw: np.ndarray | None = None, dir_qd_mvar: np.ndarray | None = None) -> None:
        """Loads per load element [MW], [MVAr], shape (n_load,); direction for loadability."""
        nb, base = self.nb, self.base
        self.pd_bus = np.bincount(self.load_bus, weights=pd_mw, minlength=nb) / base
        self.qd_bus = np.bincount(self.load_bus, weights=qd_mvar, minlength=nb) / base
        if self.loadability:
            self.dp_bus = np.bincount(self.load_bus, weights=dir_pd_mw, minlength=nb) / base
            self.dq_bus = np.bincount(self.load_bus, weights=dir_qd_mvar, minlength=nb) / base

    # ---- sparsity pattern --------------------------------------------------------------
    def _pattern(self) -> None:
        nb, xi, n_x = self.nb, self.x_index, self.n_x
        big = n_x + 2 * nb
        self.cols4 = np.stack([self.a, self.b, nb + self.a, nb + self.b], axis=1)
        x4 = xi[self.cols4]
        r16 = np.broadcast_to(x4[:, :, None], (self.n_end, 4, 4))
        c16 = np.broadcast_to(x4[:, None, :], (self.n_end, 4, 4))
        self.m16 = ((r16 >= 0) & (c16 >= 0)).reshape(self.n_end, 16)
        rows = [r16.reshape(-1, 16)[self.m16]]
        cols = [c16.reshape(-1, 16)[self.m16]]
        ang_f = np.concatenate([self.amin_f, self.amax_f])
        ang_t = np.concatenate([self.amin_t, self.amax_t])
        x2 = xi[np.stack([ang_f, ang_t], axis=1)]
        r4 = np.broadcast_to(x2[:, :, None], (x2.shape[0], 2, 2))
        c4 = np.broadcast_to(x2[:, None, :], (x2.shape[0], 2, 2))
        self.m4 = ((r4 >= 0) & (c4 >= 0)).reshape(-1, 4)
        rows.append(r4.reshape(-1, 4)[self.m4])
        cols.append(c4.reshape(-1, 4)[self.m4])
        rows.append(np.arange(n_x))
        cols.append(np.arange(n_x))
        # Jacobian of the balance equations: rows n_x + bus (P) and n_x + nb + bus (Q)
        self.mj = x4 >= 0
        ra = np.broadcast_to((n_x + self.a)[:, None], (self.n_end, 4))[self.mj]
        jc = [x4[self.mj], x4[self.mj]]
        jr = [ra, ra + nb]
        vm_x = xi[nb + np.arange(nb)]
        self.shunt_bus = np.flatnonzero(vm_x >= 0)
        jr += [n_x + self.shunt_bus, n_x + nb + self.shunt_bus]
        jc += [vm_x[self.shunt_bus], vm_x[self.shunt_bus]]
        pg_x = xi[self.i_pg + np.arange(self.ng)]
        qg_x = xi[self.i_qg + np.arange(self.ng)]
        self.pg_free, self.qg_free = np.flatnonzero(pg_x >= 0), np.flatnonzero(qg_x >= 0)
        jr += [n_x + self.gen_bus[self.pg_free], n_x + nb + self.gen_bus[self.qg_free]]
        jc += [pg_x[self.pg_free], qg_x[self.qg_free]]
        if self.loadability:
            jr.append(n_x + np.arange(2 * nb))
            jc.append(np.full(2 * nb, xi[self.i_lam]))
        jr, jc = np.concatenate(jr), np.concatenate(jc)
        rows += [jr, jc, np.arange(n_x, big)]
        cols += [jc, jr, np.arange(n_x, big)]
        rows, cols = np.concatenate(rows), np.concatenate(cols)
        keys, self.kkt_pos = np.unique(cols.astype(np.int64) * big + rows, return_inverse=True)
        self.kkt_rows = (keys % big).astype(np.int32)
        kcols = keys // big
        self.kkt_indptr = np.searchsorted(kcols, np.arange(big + 1)).astype(np.int32)
        self.kkt_nnz = keys.size
        self.kkt_size = big

    # ---- values --------------------------------------------------------------------------
    def evaluate(self, x: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
        nb, ng = self.nb, self.ng
        full = self.full(x)
        self.x_full = full
        va, vm = full[:nb], full[nb:2 * nb]
        pg, qg = full[self.i_pg:self.i_pg + ng], full[self.i_qg:self.i_qg + ng]
        a, b = self.a, self.b
        et = end_terms(va[a], va[b], vm[a], vm[b], self.y_self, self.y_mut)
        self.et = et
        vm2 = vm * vm
        p_bus = np.bincount(a, weights=et.p, minlength=nb) + self.gs * vm2 + self.pd_bus
        q_bus = np.bincount(a, weights=et.q, minlength=nb) - self.bs * vm2 + self.qd_bus
        p_bus -= np.bincount(self.gen_bus, weights=pg, minlength=nb)
        q_bus -= np.bincount(self.gen_bus, weights=qg, minlength=nb)
        if self.loadability:
            lam = full[self.i_lam]
            p_bus += lam * self.dp_bus
            q_bus += lam * self.dq_bus
            f = -lam + 0.5 * self.dispatch_weight * float(pg @ pg + qg @ qg)
        else:
            f = float(self.cost_c2 @ (pg * pg) + self.cost_c1 @ pg + self.cost_c0)
        le = self.lim_end
        self.s2 = et.p[le] ** 2 + et.q[le] ** 2
        dmin = va[self.amin_f] - va[self.amin_t]
        dmax = va[self.amax_f] - va[self.amax_t]
        h = np.concatenate([self.s2 * self.inv_r2 - 1.0, self.amin - dmin, dmax - self.amax])
        return float(f), np.concatenate([p_bus, q_bus]), h

    def _flow_grad(self) -> np.ndarray:
        """Gradient of the scaled squared flows, shape (n_lim_end, 4)."""
        et, le = self.et, self.lim_end
        return 2.0 * (et.p[le, None] * et.dp[le] + et.q[le, None] * et.dq[le]) * self.inv_r2[:, None]

    def _split_mu(self, mu: np.ndarray):
        n1 = self.lim_end.size
        n2 = n1 + self.amin.size
        return mu[:n1], mu[n1:n2], mu[n2:]

    def _cost_grad_full(self) -> np.ndarray:
        g = np.zeros(self.n_full)
        if self.loadability:
            g[self.i_lam] = -1.0
            ng, w = self.ng, self.dispatch_weight
            g[self.i_pg:self.i_pg + ng] = w * self.x_full[self.i_pg:self.i_pg + ng]
            g[self.i_qg:self.i_qg + ng] = w * self.x_full[self.i_qg:self.i_qg + ng]
        else:
            pg = self.x_full[self.i_pg:self.i_pg + self.ng]
            g[self.i_pg:self.i_pg + self.ng] = 2 * self.cost_c2 * pg + self.cost_c1
        return g

    def _angle_scatter(self, out: np.ndarray, w_min: np.ndarray, w_max: np.ndarray) -> None:
        np.add.at(out, self.amin_f, -w_min)
        np.add.at(out, self.amin_t, w_min)
        np.add.at(out, self.amax_f, w_max)
        np.add.at(out, self.amax_t, -w_max)

    def grad_lagrangian(self, lam: np.ndarray, mu: np.ndarray) -> np.ndarray:
        return self.grad_lagrangian_full(lam, mu)[self.free]

    def grad_lagrangian_full(self, lam: np.ndarray, mu: np.ndarray) -> np.ndarray:
        nb, et, a = self.nb, self.et, self.a
        lp, lq = lam[:nb], lam[nb:]
        mu_f, mu_min, mu_max = self._split_mu(mu)
        w = lp[a, None] * et.dp + lq[a, None] * et.dq
        w[self.lim_end] += mu_f[:, None] * self._flow_grad()
        out = self._cost_grad_full()
        out[:self.n_full] += np.bincount(self.cols4.ravel(), weights=w.ravel(), minlength=self.n_full)
        vm = self.x_full[nb:2 * nb]
        out[nb:2 * nb] += 2 * vm * (lp * self.gs - lq * self.bs)
        out[self.i_pg:self.i_pg + self.ng] -= lp[self.gen_bus]
        out[self.i_qg:self.i_qg + self.ng] -= lq[self.gen_bus]
        if self.loadability:
            out[self.i_lam] += lp @ self.dp_bus + lq @ self.dq_bus
        self._angle_scatter(out, mu_min, mu_max)
        return out

    def jac_h(self, v: np.ndarray) -> np.ndarray:
        vf = np.zeros(self.n_full)  # fixed variables do not move
        vf[self.free] = v
        rows_f = np.sum(self._flow_grad() * vf[self.cols4[self.lim_end]], axis=1)
        dmin = vf[self.amin_f] - vf[self.amin_t]
        dmax = vf[self.amax_f] - vf[self.amax_t]
        return np.concatenate([rows_f, -dmin, dmax])

    def jac_h_t(self, w: np.ndarray) -> np.ndarray:
        w_f, w_min, w_max = self._split_mu(w)
        vals = w_f[:, None] * self._flow_grad()
        out = np.bincount(self.cols4[self.lim_end].ravel(), weights=vals.ravel(), minlength=self.n_full)
        self._angle_scatter(out, w_min, w_max)
        return out[self.free]

    def kkt_matrix(self, lam: np.ndarray, mu: np.ndarray, d_h: np.ndarray, d_x: np.ndarray,
                   reg: float) -> sp.csc_matrix:
        nb, et, a, le = self.nb, self.et, self.a, self.lim_end
        lp, lq = lam[:nb], lam[nb:]
        mu_f, _, _ = self._split_mu(mu)
        d_f, d_min, d_max = self._split_mu(d_h)
        cp, cq = lp[a].copy(), lq[a].copy()
        wf = mu_f * self.inv_r2
        cp[le] += 2 * wf * et.p[le]
        cq[le] += 2 * wf * et.q[le]
        blk = cp[:, None, None] * et.hp + cq[:, None, None] * et.hq
        dpl, dql, dfl = et.dp[le], et.dq[le], self._flow_grad()
        blk[le] += (2 * wf[:, None, None] * (dpl[:, :, None] * dpl[:, None, :] + dql[:, :, None] * dql[:, None, :])
                    + d_f[:, None, None] * dfl[:, :, None] * dfl[:, None, :])
        dang = np.concatenate([d_min, d_max])
        ang = (dang[:, None] * np.array([1.0, -1.0, -1.0, 1.0]))[self.m4]
        diag = np.zeros(self.n_full)
        vm = self.x_full[nb:2 * nb]
        diag[nb:2 * nb] = 2 * (lp * self.gs - lq * self.bs)
        if not self.loadability:
            diag[self.i_pg:self.i_pg + self.ng] = 2 * self.cost_c2
        else:
            diag[self.i_pg:self.i_qg + self.ng] = self.dispatch_weight
        diag = diag[self.free] + d_x
        jv = [et.dp[self.mj], et.dq[self.mj],
              2 * self.gs[self.shunt_bus] * vm[self.shunt_bus], -2 * self.bs[self.shunt_bus] * vm[self.shunt_bus],
              -np.ones(self.pg_free.size), -np.ones(self.qg_free.size)]
        if self.loadability:
            jv.append(np.concatenate([self.dp_bus, self.dq_bus]))
        jv = np.concatenate(jv)
        vals = np.concatenate([blk.reshape(-1, 16)[self.m16], ang, diag, jv, jv, np.full(self.n_eq, -reg)])
        data = np.bincount(self.kkt_pos, weights=vals, minlength=self.kkt_nnz)
        n = self.kkt_size
        return sp.csc_matrix((data, self.kkt_rows, self.kkt_indptr), shape=(n, n))
