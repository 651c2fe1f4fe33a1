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

from ._prepare import Prepared, bus_injection_setpoints
from ._status import CONVERGED, SWITCHING_UNSETTLED

__all__ = ["Q_SWITCH_SLACK_MVAR", "V_RETURN_SLACK_PU", "MAX_SWITCH_ROUNDS", "run_switching"]

# A bus total beyond its summed limit by more than this switches [MVAr]; far below any
# tolerance a scorer applies, well above the power-flow tolerance (1e-8 p.u. of 100 MVA).
Q_SWITCH_SLACK_MVAR = 1e-4
# A held bus returns to PV when its voltage passes the setpoint by more than this [p.u.].
V_RETURN_SLACK_PU = 1e-6
MAX_SWITCH_ROUNDS = 10


def _bus_limits(p: Prepared) -> tuple[np.ndarray, np.ndarray]:
    net = p.net
    gb = net.gen_bus_idx
    qmin = np.bincount(gb, weights=net.qmin_mvar, minlength=net.n_bus)[p.pv]
    qmax = np.bincount(gb, weights=net.qmax_mvar, minlength=net.n_bus)[p.pv]
    return qmin, qmax


def _pv_generation_mvar(p: Prepared, vm, va, qd_bus_pv) -> np.ndarray:
    """Reactive generation at the PV buses (S, n_pv) [MVAr] from solved voltages."""
    v = vm * np.exp(1j * va)
    i_pv = (p.adm.ybus[p.pv] @ v.T).T
    return (v[:, p.pv] * np.conj(i_pv)).imag * p.net.base_mva + qd_bus_pv


def run_switching(p: Prepared, run, pg, qg_set, pd, qd, vm, va, max_rounds: int = MAX_SWITCH_ROUNDS):
    """Power flows with reactive-limit enforcement.

    ``run(pv, pq, vm, va, sbus, hold)`` solves samples (the plain solve when ``hold`` is None);
    ``qg_set`` (S, n_gen) [MVAr] reactive setpoints. Returns ``(vm, va, iterations, status,
    max_mismatch, qg_set, held)`` where ``held`` (S, n_gen) int8 is +1 / -1 for generators
    held at their maximum / minimum and 0 elsewhere.
    """
    net = p.net
    n_s = pg.shape[0]
    vset = vm[:, p.pv].copy()
    sbus = bus_injection_setpoints(p, pg, qg_set, pd, qd)
    vm, va, its, status, mis = run(p.pv, p.pq, vm, va, sbus, None)
    status = status.astype("<U32")
    limit = np.zeros((n_s, p.pv.size), np.int8)
    qmin_bus, qmax_bus = _bus_limits(p)
    qd_bus = (p.adm.cl @ qd.T).T[:, p.pv]
    # generator -> its position among the PV buses (-1: not at a PV bus)
    pv_pos = np.full(net.n_bus, -1)
    pv_pos[p.pv] = np.arange(p.pv.size)
    gpos = pv_pos[net.gen_bus_idx]
    at_pv = gpos >= 0
    nonref = p.nonref
    hold_pos = np.full(net.n_bus, -1)
    hold_pos[nonref] = np.arange(nonref.size)
    qg_set = qg_set.copy()
    for round_ in range(max_rounds + 1):
        conv = status == CONVERGED
        if p.pv.size == 0 or not conv.any():
            break
        c = np.flatnonzero(conv)
        q = _pv_generation_mvar(p, vm[c], va[c], qd_bus[c])
        lim = limit[c]
        vpv = vm[c][:, p.pv]
        high = (lim == 0) & (q > qmax_bus + Q_SWITCH_SLACK_MVAR)
        low = (lim == 0) & (q < qmin_bus - Q_SWITCH_SLACK_MVAR)
        back = ((lim == 1) & (vpv > vset[c] + V_RETURN_SLACK_PU)) | ((lim == -1) & (vpv < vset[c] - V_RETURN_SLACK_PU))
        changed = (high | low | back).any(axis=1)
        if not changed.any():
            break
        s = c[changed]
        if round_ == max_rounds:
            status[s] = SWITCHING_UNSETTLED
            break
        new = np.where(back, 0, np.where(high, 1, np.where(low, -1, lim)))[changed]
        limit[s] = new
        # regulating buses hold their setpoint (returning buses start from it again)
        vm_s = vm[s]
        vm_s[:, p.pv] = np.where(new == 0, vset[s], vm_s[:, p.pv])
        g_lim = np.where(at_pv[None, :], new[:, np.maximum(gpos, 0)], 0)
        qg_set[s] = np.where(g_lim == 1, net.qmax_mvar, np.where(g_lim == -1, net.qmin_mvar, qg_set[s]))
        hold = np.zeros((s.size, nonref.size), bool)
        hold[:, hold_pos[p.pv]] = new == 0
        sb = bus_injection_setpoints(p, pg[s], qg_set[s], pd[s], qd[s])
        vm_n, va_n, its_n, st_n, mis_n = run(np.zeros(0, np.int64), nonref, vm_s, va[s], sb, hold)
        vm[s], va[s], mis[s] = vm_n, va_n, mis_n
        its[s] += its_n
        status[s] = st_n
    held = np.where(at_pv[None, :], limit[:, np.maximum(gpos, 0)], 0).astype(np.int8)
    return vm, va, its, status, mis, qg_set, held
