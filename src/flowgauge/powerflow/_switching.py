"""Reactive-limit enforcement for stacked samples: PV buses become PQ at a violated limit and
return to PV when their voltage moves to the side of the setpoint that frees the generator.

The rules (docs/powerflow.md, "Reactive limits"; common practice in power-flow programs):

* A PV bus is judged by the total reactive output of its generators against the sum of their
  limits (the output is shared among them in proportion to their reactive ranges, so a bus
  total outside the summed limits is the same as every generator outside its own). When the
  total exceeds the summed maximum (falls below the summed minimum) by more than
  :data:`Q_SWITCH_SLACK_MVAR`, every generator of the bus is held at its own maximum
  (minimum) and the bus becomes PQ; all violating buses of a sample switch at once.
* A bus held at its maximum returns to PV when its voltage rises above its setpoint by more
  than :data:`V_RETURN_SLACK_PU` (holding the setpoint would then need less reactive power);
  one held at its minimum returns when its voltage falls below the setpoint by that much.
* Reference buses are never switched; their generators' outputs are judged by the caller.
* After every change the samples that changed are solved again from their last voltages;
  a sample still changing after ``max_rounds`` rounds (default :data:`MAX_SWITCH_ROUNDS`) ends with status
  ``switching_unsettled``.

Switched samples are solved in the pattern where every non-reference bus is PQ, with the
reactive rows of their regulating buses replaced by ``dVm = 0`` (``_newton._hold_voltage``), so
all samples share one sparsity pattern whatever their PV/PQ sets.
"""

from __future__ import annotations

import numpy as np

from .._compiled import ELIDE_BYTES, complex_product, compiled, polar_voltage, sparse_row_product
from ._prepare import Prepared, bus_injection_setpoints
from ._status import CONVERGED, SWITCHING_UNSETTLED

__all__ = ["Q_SWITCH_SLACK_MVAR", "V_RETURN_SLACK_PU", "MAX_SWITCH_ROUNDS", "DECISION_TOL_PU", "run_switching"]

# A bus total beyond its summed limit by more than this switches [MVAr]; far below any
# tolerance a scorer applies, well above the power-flow tolerance (1e-8 p.u. of 100 MVA).
Q_SWITCH_SLACK_MVAR = 1e-4
# A held bus returns to PV when its voltage passes the setpoint by more than this [p.u.].
V_RETURN_SLACK_PU = 1e-6
MAX_SWITCH_ROUNDS = 10
# Switching is decided on solutions converged to this mismatch [p.u.] and confirmed at the
# power flow's own tolerance: a decision needs reactive outputs to about 1e-3 p.u. (0.1 MVAr on
# 100 MVA), not 1e-8; a wrong early decision is undone when the final solution is checked.
DECISION_TOL_PU = 1e-3


def _bus_limits(p: Prepared) -> tuple[np.ndarray, np.ndarray]:
    net = p.net
    gb = net.gen_bus_idx
    qmin = np.bincount(gb, weights=net.qmin_mvar, minlength=net.n_bus)[p.pv]
    qmax = np.bincount(gb, weights=net.qmax_mvar, minlength=net.n_bus)[p.pv]
    return qmin, qmax


def _pv_generation_mvar_numpy(p: Prepared, vm, va, qd_bus_pv) -> np.ndarray:
    """Reactive generation at the PV buses (S, n_pv) [MVAr] from solved voltages, in numpy (the
    reference :func:`_pv_generation_mvar` is checked against)."""
    v = vm * np.exp(1j * va)
    i_pv = (p.adm.ybus[p.pv] @ v.T).T
    return (v[:, p.pv] * np.conj(i_pv)).imag * p.net.base_mva + qd_bus_pv


def _pv_generation_mvar(p: Prepared, vm, va, qd_bus_pv) -> np.ndarray:
    """:func:`_pv_generation_mvar_numpy` compiled (:func:`_pv_generation_rows`), bit for bit."""
    y = p.adm.ybus.tocsr()  # itself when already CSR
    vm, va = np.ascontiguousarray(vm, np.float64), np.ascontiguousarray(va, np.float64)
    pv = np.ascontiguousarray(p.pv, np.int64)
    out = np.empty((vm.shape[0], pv.size))
    # numpy computes conj(I) * v[:, pv] in conj(I)'s memory (its temporary elision) from this size
    swapped = vm.shape[0] * pv.size * 16 >= ELIDE_BYTES
    _pv_generation_rows(vm, va, y.indptr, y.indices, y.data, pv, float(p.net.base_mva),
                        np.ascontiguousarray(qd_bus_pv, np.float64), swapped, out)
    return out


@compiled
def _pv_generation_rows(vm, va, indptr, indices, ydata, pv, base, qd_bus_pv, swapped, out):
    """Per sample, numpy's operations of :func:`_pv_generation_mvar_numpy` in numpy's rounding
    (as ``_newton._mismatch_rows``): ``v = vm exp(j va)``, each PV bus's current as SciPy's
    sparse product sums it, ``v conj(I)`` as numpy's complex product (operands swapped where
    numpy elides the temporary ``conj(I)``), then its imaginary part times ``base`` plus the
    bus's reactive load, two roundings."""
    n_s, n_bus = vm.shape
    v = np.empty(n_bus, np.complex128)
    for s in range(n_s):
        for i in range(n_bus):
            vr, vi = polar_voltage(vm[s, i], va[s, i])[2:]
            v[i] = complex(vr, vi)
        for k in range(pv.size):
            i = pv[k]
            yr, yi = sparse_row_product(indptr, indices, ydata, v, i)
            if swapped:
                mi = complex_product(yr, -yi, v[i].real, v[i].imag)[1]
            else:
                mi = complex_product(v[i].real, v[i].imag, yr, -yi)[1]
            out[s, k] = mi * base + qd_bus_pv[s, k]


def run_switching(p: Prepared, run, pg, qg_set, pd, qd, vm, va, max_rounds: int = MAX_SWITCH_ROUNDS,
                  tol: float = 1e-8):
    """Power flows with reactive-limit enforcement.

    ``run(pv, pq, vm, va, sbus, hold, tol)`` solves samples (the plain solve when ``hold`` is
    None) to the mismatch tolerance ``tol`` [p.u.]; ``qg_set`` (S, n_gen) [MVAr] reactive
    setpoints. Switching is decided on solutions converged to :data:`DECISION_TOL_PU` (or
    ``tol`` if looser) and confirmed on the final solution at ``tol``: a sample ends only when
    its solution at ``tol`` calls for no change. Returns ``(vm, va, iterations, status,
    max_mismatch, qg_set, held)`` where ``held`` (S, n_gen) int8 is +1 / -1 for generators
    held at their maximum / minimum and 0 elsewhere.
    """
    net = p.net
    n_s = pg.shape[0]
    loose = max(DECISION_TOL_PU, tol)
    vset = vm[:, p.pv].copy()
    qg_set = qg_set.copy()
    limit = np.zeros((n_s, p.pv.size), np.int8)
    qmin_bus, qmax_bus = _bus_limits(p)
    qd_bus = (p.adm.cl @ qd.T).T[:, p.pv]
    # generator -> its position among the PV buses (-1: not at a PV bus)
    pv_pos = np.full(net.n_bus, -1)
    pv_pos[p.pv] = np.arange(p.pv.size)
    gpos = pv_pos[net.gen_bus_idx]
    at_pv = gpos >= 0
    rounds = np.zeros(n_s, np.int64)
    final = np.zeros(n_s, bool)  # the current solution is at ``tol`` (else at ``loose``)

    ever_held = np.zeros(p.pv.size, bool)

    def solve(rows, tolerance):
        """Solve samples ``rows`` from their current voltages, each to its own ``tolerance``, in
        one pattern: PQ = the network's PQ buses and every PV bus held so far in any sample of
        this call (the set only grows, so a call builds few patterns); in each sample the
        reactive rows of those buses it does not hold keep their voltage (``hold``)."""
        ever_held[:] |= (limit[rows] != 0).any(axis=0)
        union = p.pv[ever_held]
        sb = bus_injection_setpoints(p, pg[rows], qg_set[rows], pd[rows], qd[rows])
        if union.size == 0:
            out = run(p.pv, p.pq, vm[rows], va[rows], sb, None, tolerance)
        else:
            pv, pq = np.setdiff1d(p.pv, union), np.union1d(p.pq, union)
            pos = pv_pos[pq]
            hold = (pos >= 0)[None, :] & (limit[rows][:, np.maximum(pos, 0)] == 0)
            out = run(pv, pq, vm[rows], va[rows], sb, hold, tolerance)
        vm[rows], va[rows], its_r, st_r, mis[rows] = out
        its[rows] += its_r
        status[rows] = st_r

    its = np.zeros(n_s, np.int64)
    mis = np.zeros(n_s)
    status = np.full(n_s, CONVERGED, dtype="<U32")
    vm, va = np.array(vm, float), np.array(va, float)
    solve(np.arange(n_s), loose)
    final[:] = loose <= tol
    while True:
        live = np.flatnonzero(status == CONVERGED)
        if p.pv.size == 0 or live.size == 0:
            break
        q = _pv_generation_mvar(p, vm[live], va[live], qd_bus[live])
        lim = limit[live]
        vpv = vm[live][:, p.pv]
        high = (lim == 0) & (q > qmax_bus + Q_SWITCH_SLACK_MVAR)
        low = (lim == 0) & (q < qmin_bus - Q_SWITCH_SLACK_MVAR)
        back = ((lim == 1) & (vpv > vset[live] + V_RETURN_SLACK_PU)) | \
               ((lim == -1) & (vpv < vset[live] - V_RETURN_SLACK_PU))
        changed = (high | low | back).any(axis=1)
        s = live[changed]
        polish = live[~changed & ~final[live]]
        if s.size == 0 and polish.size == 0:
            break
        over = s[rounds[s] >= max_rounds]
        status[over] = SWITCHING_UNSETTLED
        keep = ~np.isin(s, over)
        s, new = s[keep], np.where(back, 0, np.where(high, 1, np.where(low, -1, lim)))[changed][keep]
        if s.size:
            rounds[s] += 1
            limit[s] = new
            # regulating buses hold their setpoint (returning buses start from it again)
            vm_s = vm[s]
            vm_s[:, p.pv] = np.where(new == 0, vset[s], vm_s[:, p.pv])
            vm[s] = vm_s
            g_lim = np.where(at_pv[None, :], new[:, np.maximum(gpos, 0)], 0)
            qg_set[s] = np.where(g_lim == 1, net.qmax_mvar, np.where(g_lim == -1, net.qmin_mvar, qg_set[s]))
        # one solve for both: switched samples to the decision tolerance, the others to the final
        rows = np.concatenate([s, polish])
        order = np.argsort(rows, kind="stable")
        rows = rows[order]
        tolerance = np.concatenate([np.full(s.size, loose), np.full(polish.size, tol)])[order]
        if rows.size:
            solve(rows, tolerance)
            final[rows] = tolerance <= tol
    held = np.where(at_pv[None, :], limit[:, np.maximum(gpos, 0)], 0).astype(np.int8)
    return vm, va, its, status, mis, qg_set, held
