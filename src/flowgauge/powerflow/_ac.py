"""AC power flow by Newton-Raphson: single solve (with optional reactive-limit enforcement)
and batched solve of many samples of one network."""

from __future__ import annotations

import time

import numpy as np

from .._compiled import ELIDE_BYTES, complex_abs, complex_product, compiled, polar_voltage, sparse_row_product
from ..errors import InputError
from ..network._model import Network
from ._dc import dc_angles, reference_pg
from ._newton import LINEAR_SOLVERS, newton, stacked_lu
from ._prepare import Prepared, bus_injection_setpoints, prepared, stack_input
from ._result import BatchPowerFlowResult, PowerFlowResult
from ._switching import MAX_SWITCH_ROUNDS, run_switching
from ._status import CONVERGED, STATUSES

__all__ = ["solve_powerflow", "solve_powerflow_batch", "INITS", "default_vm_pu"]

INITS = ("flat", "dc", "given")
_EPS = np.finfo(float).eps
# Samples per Newton chunk: at most this many float entries in the largest working array.
BATCH_ENTRIES = 6e6


def default_vm_pu(net: Network) -> np.ndarray:
    """Voltage magnitudes used when none are given, shape (n_bus,) [p.u.]: ``net.vm_pu``,
    with the setpoint ``vg_pu`` of the last generator (network order) at each generator bus."""
    vm = np.array(net.vm_pu, float)
    last = np.full(net.n_bus, -1)
    np.maximum.at(last, net.gen_bus_idx, np.arange(net.n_gen))
    has = last >= 0
    vm[has] = net.vg_pu[last[has]]
    return vm


def _check_options(init: str, tol: float, max_iter: int, va_deg) -> None:
    if init not in INITS:
        raise InputError(f"must be one of {list(INITS)}, got {init!r}", where="init")
    if not (np.isfinite(tol) and tol > 0):
        raise InputError(f"must be a positive number, got {tol!r}", where="tol")
    if int(max_iter) != max_iter or max_iter < 0:
        raise InputError(f"must be a non-negative integer, got {max_iter!r}", where="max_iter")
    if init == "given" and va_deg is None:
        raise InputError("init='given' needs start angles va_deg", where="va_deg")


def _start_angles(p: Prepared, init: str, va_deg: np.ndarray | None, p_spec: np.ndarray) -> np.ndarray:
    """Start angles (S, n_bus) [rad]; reference angles from ``va_deg`` if given, else the network."""
    n_s, net = p_spec.shape[0], p.net
    src = np.deg2rad(va_deg) if va_deg is not None else np.deg2rad(net.va_deg)[None, :]
    va_ref = np.broadcast_to(src[:, p.ref], (n_s, p.ref.size))
    if init == "given":
        return np.array(np.deg2rad(va_deg), float)
    if init == "dc":
        return dc_angles(p, p_spec, va_ref)
    # flat: every bus at the angle of its island's reference bus
    by_island = np.zeros((n_s, int(p.island.max()) + 1))
    by_island[:, p.island[p.ref]] = va_ref
    return by_island[:, p.island]


def _share_q(p: Prepared, q_bus_mvar: np.ndarray, qg_set: np.ndarray, fixed: np.ndarray) -> np.ndarray:
    """Reactive output (S, n_gen) [MVAr]: each PV/reference bus's total ``q_bus_mvar`` shared
    among its generators in proportion to their reactive ranges (equally where the bus's
    range is empty or not finite); generators where ``fixed`` keep ``qg_set``."""
    net = p.net
    gb = net.gen_bus_idx
    qmin, qmax = net.qmin_mvar, net.qmax_mvar
    n_at = p.gens_at_bus[gb]
    qmin_bus = np.bincount(gb, weights=qmin, minlength=net.n_bus)[gb]
    qmax_bus = np.bincount(gb, weights=qmax, minlength=net.n_bus)[gb]
    span = qmax_bus - qmin_bus
    q = q_bus_mvar[:, gb]
    with np.errstate(all="ignore"):
        prop = qmin + (q - qmin_bus) / (span + _EPS) * (qmax - qmin)
        equal = qmin + (q - qmin_bus) / n_at
        equal = np.where(np.isfinite(equal), equal, q / n_at)
    use_prop = np.isfinite(span) & (span > 0)
    out = np.where(n_at == 1, q, np.where(use_prop, prop, equal))
    return np.where(fixed, qg_set, out)


def _assemble(p: Prepared, vm, va, pg, qg_set, pd, qd, fixed_q) -> dict:
    """Generator outputs and branch flows from the solved voltages (all (S, ·) arrays)."""
    with np.errstate(all="ignore"):  # the last iterate of a diverged sample may be huge
        return _assemble_fields(p, vm, va, pg, qg_set, pd, qd, fixed_q)


def _assemble_fields_numpy(p: Prepared, vm, va, pg, qg_set, pd, qd, fixed_q) -> dict:
    """:func:`_assemble_fields` in numpy (the reference it is checked against)."""
    net, adm, base = p.net, p.adm, p.net.base_mva
    v = vm * np.exp(1j * va)
    s_inj = v * np.conj((adm.ybus @ v.T).T) * base
    sd_bus = (adm.cl @ (pd + 1j * qd).T).T
    pg_out = reference_pg(p, pg, s_inj.real, sd_bus.real)
    qg_out = _share_q(p, s_inj.imag + sd_bus.imag, qg_set, fixed_q)
    i_br = np.conj((p.branch_currents @ v.T).T)
    nl = net.n_branch
    sf = v[:, net.f_idx] * i_br[:, :nl] * base
    st = v[:, net.t_idx] * i_br[:, nl:] * base
    return dict(vm_pu=vm, va_deg=np.rad2deg(va), pg_mw=pg_out, qg_mvar=qg_out,
                pf_mw=sf.real, qf_mvar=sf.imag, pt_mw=st.real, qt_mvar=st.imag,
                sf_mva=np.abs(sf), st_mva=np.abs(st))


def _assemble_fields(p: Prepared, vm, va, pg, qg_set, pd, qd, fixed_q) -> dict:
    """Generator outputs and branch flows from the solved voltages: the bus injections and the
    branch flows compiled (:func:`_flow_rows`), bit for bit :func:`_assemble_fields_numpy`."""
    net, adm, base = p.net, p.adm, p.net.base_mva
    vm, va = np.ascontiguousarray(vm, np.float64), np.ascontiguousarray(va, np.float64)
    n_s, nl = vm.shape[0], net.n_branch
    y, b = adm.ybus.tocsr(), p.branch_currents
    s_inj = np.empty((n_s, net.n_bus), np.complex128)
    sf = np.empty((n_s, nl), np.complex128)
    st = np.empty((n_s, nl), np.complex128)
    mva = np.empty((2, n_s, nl))
    # numpy computes conj(I) * v in conj(I)'s memory (its temporary elision) from this size
    swapped = n_s * net.n_bus * 16 >= ELIDE_BYTES
    _flow_rows(vm, va, y.indptr, y.indices, y.data, b.indptr, b.indices, b.data,
               np.ascontiguousarray(net.f_idx, np.int64), np.ascontiguousarray(net.t_idx, np.int64),
               float(base), swapped, s_inj, sf, st, mva)
    sd_bus = (adm.cl @ (pd + 1j * qd).T).T
    pg_out = reference_pg(p, pg, s_inj.real, sd_bus.real)
    qg_out = _share_q(p, s_inj.imag + sd_bus.imag, qg_set, fixed_q)
    return dict(vm_pu=vm, va_deg=np.rad2deg(va), pg_mw=pg_out, qg_mvar=qg_out,
                pf_mw=sf.real, qf_mvar=sf.imag, pt_mw=st.real, qt_mvar=st.imag,
                sf_mva=mva[0], st_mva=mva[1])


@compiled
def _flow_rows(vm, va, y_ptr, y_idx, y_data, b_ptr, b_idx, b_data, f_idx, t_idx, base, swapped,
               s_inj, sf, st, mva):
    """Per sample, numpy's operations of :func:`_assemble_fields_numpy` for the bus injections
    and branch flows, in numpy's rounding (as ``_newton._mismatch_rows``): ``v = vm exp(j va)``;
    currents as SciPy's sparse product sums them; ``v conj(I)`` and ``v_f conj(I_f)`` as numpy's
    complex product (the first with its operands swapped where numpy elides ``conj(I)``), then
    times ``base`` (a complex product with ``base + 0j``); the magnitudes as numpy's absolute
    value (:func:`.._compiled.complex_abs`)."""
    n_s, n_bus = vm.shape
    nl = f_idx.size
    v = np.empty(n_bus, np.complex128)
    for s in range(n_s):
        for i in range(n_bus):
            vr, vi = polar_voltage(vm[s, i], va[s, i])[2:]
            v[i] = complex(vr, vi)
        for i in range(n_bus):
            yr, yi = sparse_row_product(y_ptr, y_idx, y_data, v, i)
            if swapped:
                mr, mi = complex_product(yr, -yi, v[i].real, v[i].imag)
            else:
                mr, mi = complex_product(v[i].real, v[i].imag, yr, -yi)
            sr, si = complex_product(mr, mi, base, 0.0)
            s_inj[s, i] = complex(sr, si)
        for r in range(2 * nl):
            yr, yi = sparse_row_product(b_ptr, b_idx, b_data, v, r)
            end = v[f_idx[r]] if r < nl else v[t_idx[r - nl]]
            mr, mi = complex_product(end.real, end.imag, yr, -yi)
            fr, fi = complex_product(mr, mi, base, 0.0)
            if r < nl:
                sf[s, r] = complex(fr, fi)
                mva[0, s, r] = complex_abs(fr, fi)
            else:
                st[s, r - nl] = complex(fr, fi)
                mva[1, s, r - nl] = complex_abs(fr, fi)


def _run(p, pv, pq, vm0, va0, sbus, tol, max_iter, linear, hold=None):
    """Newton-Raphson for all samples, in chunks that keep the working arrays bounded."""
    pat = p.pattern(pv, pq)
    lu = stacked_lu(pat) if linear == "stacked" else None
    per_sample = max(lu.nnz if lu is not None else 0, 4 * pat.nnz)
    rows = max(1, int(BATCH_ENTRIES // per_sample))
    n_s = sbus.shape[0]
    if n_s > rows:  # equal pieces rather than full ones and a small remainder (samples are independent)
        pieces = -(-n_s // rows)
        rows = -(-n_s // pieces)
    if n_s <= rows:
        return newton(pat, p.adm.ybus, vm0, va0, sbus, tol, int(max_iter), linear, hold)
    tols = np.broadcast_to(np.asarray(tol, dtype=float), (n_s,))
    parts = [newton(pat, p.adm.ybus, vm0[i:i + rows], va0[i:i + rows], sbus[i:i + rows], tols[i:i + rows],
                    int(max_iter), linear, None if hold is None else hold[i:i + rows])
             for i in range(0, n_s, rows)]  # loop over chunks of samples
    return tuple(np.concatenate([part[k] for part in parts]) for k in range(5))


def solve_powerflow_batch(net: Network, *, pd_mw, qd_mvar, pg_mw=None, vm_pu=None, va_deg=None,
                          init: str = "flat", tol: float = 1e-8, max_iter: int = 20,
                          linear: str = "stacked", enforce_q_limits: bool = False,
                          max_switch_rounds: int = MAX_SWITCH_ROUNDS) -> BatchPowerFlowResult:
    """AC power flows of many samples of one network (Newton-Raphson, polar coordinates).

    ``pd_mw``, ``qd_mvar``: loads, shape (n_samples, n_load) [MW], [MVAr].
    ``pg_mw`` (n_samples, n_gen) [MW]: generator setpoints, fixed except at the first
    generator of each reference bus; None: ``net.pg_mw`` for every sample.
    ``vm_pu`` (n_samples, n_bus) [p.u.]: fixed at PV and reference buses, start elsewhere;
    None: :func:`default_vm_pu`. ``va_deg`` (n_samples, n_bus) [deg]: start angles for
    ``init="given"``; when given with another ``init`` only its reference-bus angles are used.
    ``init``: "flat" (every bus at its island's reference angle), "dc" (angles of the DC power
    flow of the specified injections) or "given". Converged when the largest absolute
    mismatch is below ``tol`` [p.u.] within ``max_iter`` Newton steps; no fallback, no clipping.
    Gives the same numbers as :func:`solve_powerflow` sample by sample. ``linear``: how the
    Newton steps are solved, a key of ``LINEAR_SOLVERS`` (see docs/powerflow.md).
    ``enforce_q_limits``: PV buses switch to PQ at a violated reactive limit and back
    (``_switching``: rules in docs/powerflow.md); ``iterations`` then counts the Newton steps
    of all rounds, ``at_q_limit`` records the generators held at a limit, and a sample still
    switching after ``max_switch_rounds`` rounds ends ``switching_unsettled``. Returns a
    :class:`BatchPowerFlowResult`; failure is data (``status``), never an exception.
    """
    t0 = time.perf_counter()
    _check_options(init, tol, max_iter, va_deg)
    if linear not in LINEAR_SOLVERS:
        raise InputError(f"must be one of {list(LINEAR_SOLVERS)}, got {linear!r}", where="linear")
    n_s = int(np.shape(pd_mw)[0]) if np.ndim(pd_mw) == 2 else -1
    if n_s < 0:
        raise InputError(f"expected shape (n_samples, {net.n_load}), got {np.shape(pd_mw)}", where="pd_mw")
    p = prepared(net)
    pd = stack_input("pd_mw", pd_mw, net.pd_mw, net.n_load, n_s)
    qd = stack_input("qd_mvar", qd_mvar, net.qd_mvar, net.n_load, n_s)
    pg = stack_input("pg_mw", pg_mw, net.pg_mw, net.n_gen, n_s)
    vm = stack_input("vm_pu", vm_pu, default_vm_pu(net), net.n_bus, n_s)
    va_in = None if va_deg is None else stack_input("va_deg", va_deg, net.va_deg, net.n_bus, n_s)
    qg = np.broadcast_to(net.qg_mvar, pg.shape).copy()
    fixed = np.broadcast_to(p.gens_fixed_q, pg.shape)
    sbus = bus_injection_setpoints(p, pg, qg, pd, qd)
    va0 = _start_angles(p, init, va_in, sbus.real)
    at_limit = None
    if enforce_q_limits:
        vm_s, va_s, its, status, mis, qg, at_limit = _solve_switching(p, pg, qg, pd, qd, vm, va0, tol, max_iter,
                                                                      linear, max_switch_rounds)
        fixed = fixed | (at_limit != 0)
    else:
        vm_s, va_s, its, status, mis = _run(p, p.pv, p.pq, vm, va0, sbus, tol, max_iter, linear)
    fields = _assemble(p, vm_s, va_s, pg, qg, pd, qd, fixed)
    msg = np.array([STATUSES[s] for s in status.tolist()], dtype=str)
    return BatchPowerFlowResult(converged=status == CONVERGED, status=status, message=msg,
                                iterations=its, max_mismatch_pu=mis, seconds=time.perf_counter() - t0,
                                at_q_limit=at_limit, **fields)


def _solve_switching(p, pg, qg, pd, qd, vm, va0, tol, max_iter, linear, max_rounds=MAX_SWITCH_ROUNDS):
    if int(max_rounds) != max_rounds or max_rounds < 0:
        raise InputError(f"must be a non-negative integer, got {max_rounds!r}", where="max_switch_rounds")

    def run(pv, pq, vm_, va_, sbus_, hold, tolerance):
        return _run(p, pv, pq, vm_, va_, sbus_, tolerance, max_iter, linear, hold)

    return run_switching(p, run, pg, qg, pd, qd, vm, va0, int(max_rounds), tol)


def solve_powerflow(net: Network, *, pd_mw=None, qd_mvar=None, pg_mw=None, vm_pu=None, va_deg=None,
                    init: str = "flat", tol: float = 1e-8, max_iter: int = 20,
                    enforce_q_limits: bool = False) -> PowerFlowResult:
    """AC power flow of one operating point (Newton-Raphson, polar coordinates, sparse LU).

    ``pd_mw``, ``qd_mvar`` (n_load,) [MW], [MVAr], default the network's loads;
    ``pg_mw`` (n_gen,) [MW], ``vm_pu`` (n_bus,) [p.u.], ``va_deg`` (n_bus,) [deg],
    ``init``, ``tol`` [p.u.], ``max_iter``: as in :func:`solve_powerflow_batch`.
    ``enforce_q_limits``: PV buses switch to PQ at a violated reactive limit and back, as in
    :func:`solve_powerflow_batch` (rules in docs/powerflow.md); ``iterations`` then counts the
    Newton steps of all rounds. Returns a :class:`PowerFlowResult`.
    """
    t0 = time.perf_counter()
    _check_options(init, tol, max_iter, va_deg)
    p = prepared(net)
    pd = stack_input("pd_mw", pd_mw, net.pd_mw, net.n_load, None)
    qd = stack_input("qd_mvar", qd_mvar, net.qd_mvar, net.n_load, None)
    pg = stack_input("pg_mw", pg_mw, net.pg_mw, net.n_gen, None)
    vm = stack_input("vm_pu", vm_pu, default_vm_pu(net), net.n_bus, None)
    va_in = None if va_deg is None else stack_input("va_deg", va_deg, net.va_deg, net.n_bus, None)
    qg = net.qg_mvar[None, :].copy()
    sbus = bus_injection_setpoints(p, pg, qg, pd, qd)
    va = _start_angles(p, init, va_in, sbus.real)
    fixed = p.gens_fixed_q[None, :]
    if enforce_q_limits:
        vm, va, its, status, mis, qg, at_limit = _solve_switching(p, pg, qg, pd, qd, vm, va, tol, max_iter, "loop")
        fixed = fixed | (at_limit != 0)
    else:
        vm, va, its, status, mis = _run(p, p.pv, p.pq, vm, va, sbus, tol, max_iter, "loop")
    total = int(its[0])
    fields = _assemble(p, vm, va, pg, qg, pd, qd, fixed)
    one = {k: a[0] for k, a in fields.items()}
    return PowerFlowResult(converged=bool(status[0] == CONVERGED), status=str(status[0]),
                           message=STATUSES[str(status[0])], iterations=total,
                           max_mismatch_pu=float(mis[0]), seconds=time.perf_counter() - t0, **one)

