"""Restoration: an AC power flow from the predicted generator setpoints, then every limit of
the restored operating point checked against the scoring tolerances.

The power flow keeps the predicted active power at every generator except at the reference
bus and the predicted voltage magnitude at every generator bus and the reference bus, starts
from those voltages with angles from a DC power flow of the predicted injections, and runs
Newton-Raphson to 1e-8 p.u. in at most 20 iterations (the profile records both): no fallback,
no clipping of the setpoints.

Samples are solved in fixed chunks of :data:`CHUNK_SAMPLES` (or the profile's ``chunk_samples``:
256 with reactive-limit enforcement, whose rounds cost a fixed overhead per Newton step that a
larger chunk spreads over more samples), in order, whatever the number of
workers or the Dask cluster, so the results are the same bytes however they are spread.
"""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .._workers import pool_initializer
from ..errors import InputError
from ..network import Network
from ..powerflow._status import SWITCHING_UNSETTLED
from ._metrics import (angle_difference_violation_deg, bound_violation, generator_cost_per_h, thermal_overload_mva,
                       thermal_overload_pct)
from ._grading import element_excess, severity, tolerance_ratios
from ._profile import ScoringProfile

__all__ = ["CAUSES", "GRADED_CAUSES", "CHUNK_SAMPLES", "Restoration", "restore", "solve_restoration_chunk",
           "causes_of"]

CHUNK_SAMPLES = 64
JUDGE_ROWS = 1024  # samples judged at a time (bounds the temporaries of the limit checks)
SCHEDULER_TIMEOUT_S = 10  # seconds to wait for a Dask scheduler to answer

# The one table of restoration failure causes: name -> what it means. Several may apply.
CAUSES: dict[str, str] = {
    "diverged": "the power flow did not converge within the iteration limit",
    "voltage": "a bus voltage magnitude outside its limits beyond the voltage tolerance",
    "reactive": "a generator's reactive output outside its limits beyond the reactive-power tolerance",
    "thermal": "a branch end's apparent power above its rating beyond the thermal tolerance",
    "active_power": "a generator's active output outside its limits beyond the active-power tolerance",
    "angle": "a branch angle difference outside its limits beyond the angle tolerance",
}

# Causes of profiles that enforce reactive limits: the table above plus one.
GRADED_CAUSES: dict[str, str] = {
    **CAUSES,
    "switching": "buses still switched between PV and PQ after the last round of reactive-limit enforcement",
}

# Graded family -> cause it triggers
_GRADED_CAUSE = {"voltage": "voltage", "reactive_power": "reactive", "thermal": "thermal",
                 "active_power": "active_power", "angle": "angle"}

# Restored violation family -> (cause it triggers, profile tolerance key)
_FAMILY_CAUSE = {
    "restored_voltage_pu": ("voltage", "voltage_pu"),
    "restored_reactive_power_mvar": ("reactive", "reactive_power_mvar"),
    "restored_thermal_pct": ("thermal", "thermal_pct_of_rating"),
    "restored_active_power_mw": ("active_power", "active_power_mw"),
    "restored_angle_deg": ("angle", "angle_deg"),
}

_FIELDS = ("converged", "iterations", "vm_pu", "va_deg", "pg_mw", "qg_mvar", "sf_mva", "st_mva")


@dataclass(frozen=True)
class Restoration:
    """Restoration outcome for stacked samples.

    ``converged``, ``failed`` (n_samples,) bool; ``iterations`` (n_samples,) int;
    ``vm_pu``, ``va_deg`` (n_samples, n_bus) [p.u., degrees]; ``pg_mw``, ``qg_mvar``
    (n_samples, n_gen) [MW, MVAr]; ``sf_mva``, ``st_mva`` (n_samples, n_branch) [MVA];
    ``cost_per_h`` (n_samples,) [$/h]; ``violations`` family -> (n_samples,) magnitude in the
    family's unit; ``causes`` cause -> (n_samples,) bool. Values of diverged samples are NaN.
    ``vm_pu``, ``va_deg``, ``qg_mvar``, ``sf_mva`` and ``st_mva`` are None from
    ``restore(..., keep_state=False)``.
    """

    converged: np.ndarray
    iterations: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray
    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    sf_mva: np.ndarray
    st_mva: np.ndarray
    cost_per_h: np.ndarray
    violations: dict[str, np.ndarray]
    causes: dict[str, np.ndarray]
    failed: np.ndarray
    # profiles with grading only (None otherwise): generators held at a reactive limit (S,),
    # tolerance ratio per limit family (S,), severity (S,); see _grading
    switched_generators: np.ndarray | None = None
    ratios: dict[str, np.ndarray] | None = None
    severity: np.ndarray | None = None


def solve_restoration_chunk(net: Network, pd_mw, qd_mvar, pg_mw, vm_pu, powerflow: dict) -> dict[str, np.ndarray]:
    """Restoration power flows of one chunk of samples (runs in a worker process or on a Dask
    worker). Arrays shape (n_chunk, n_x); returns the fields the scorer uses."""
    from ..powerflow import solve_powerflow_batch

    enforce = bool(powerflow.get("enforce_q_limits", False))
    extra = {"max_switch_rounds": powerflow["max_switch_rounds"]} if enforce else {}
    if "linear" in powerflow:  # set by the scorer of network states for its small groups (_state)
        extra["linear"] = powerflow["linear"]
    res = solve_powerflow_batch(net, pd_mw=pd_mw, qd_mvar=qd_mvar, pg_mw=pg_mw, vm_pu=vm_pu,
                                init=powerflow["start"], tol=powerflow["tolerance_pu"],
                                max_iter=powerflow["max_iterations"], enforce_q_limits=enforce, **extra)
    out = {k: np.asarray(getattr(res, k)) for k in _FIELDS}
    if enforce:
        out["at_q_limit"] = res.at_q_limit
        out["unsettled"] = res.status == SWITCHING_UNSETTLED
    return out


def _chunks(n: int, size: int = CHUNK_SAMPLES) -> list[slice]:
    return [slice(i, min(i + size, n)) for i in range(0, n, size)]


# The network of this worker process, set once by the pool's initializer so that the power
# flow's per-network preparation (admittances, Jacobian pattern, ordering) is reused by every
# chunk the process solves.
_WORKER_NET: Network | None = None


def _init_worker(net: Network) -> None:
    global _WORKER_NET
    _WORKER_NET = net


def _solve_in_worker(pd_mw, qd_mvar, pg_mw, vm_pu, powerflow: dict) -> dict[str, np.ndarray]:
    return solve_restoration_chunk(_WORKER_NET, pd_mw, qd_mvar, pg_mw, vm_pu, powerflow)


def _connect(scheduler: str):
    try:
        from distributed import Client
    except ImportError as exc:  # pragma: no cover - depends on the installed extras
        raise InputError("needs Dask: pip install 'flowgauge[cluster]'", where="--scheduler") from exc
    try:
        return Client(scheduler, timeout=SCHEDULER_TIMEOUT_S, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot connect to a Dask scheduler ({exc})", where=f"--scheduler {scheduler}") from exc


def _run_chunks(net, arrays, powerflow, workers, scheduler, progress, each=None) -> dict[str, np.ndarray]:
    """Solve every chunk and return the fields of all samples, each array allocated once and
    filled as the chunks arrive (a chunk's own arrays are dropped once copied). With ``each``,
    every chunk's fields go through ``each(rows, fields)`` first, in order, and what it returns
    is kept."""
    n = arrays[0].shape[0]
    pieces = _chunks(n, int(powerflow.get("chunk_samples", CHUNK_SAMPLES)))
    parts = [tuple(a[s] for a in arrays) for s in pieces]
    out: dict[str, np.ndarray] = {}

    def collect(results):
        done = 0
        for s, res in zip(pieces, results):
            if each is not None:
                res = each(s, res)
            for k, v in res.items():
                if k not in out:
                    out[k] = np.empty((n,) + v.shape[1:], v.dtype)
                out[k][s] = v
            del res
            done += s.stop - s.start
            if progress is not None:
                progress(done, n)

    if scheduler is not None:
        client = _connect(scheduler)
        try:
            # the network goes to every worker once; each chunk refers to that same copy
            net_future = client.scatter(net, broadcast=True)
            futures = [client.submit(solve_restoration_chunk, net_future, *p, powerflow, pure=False) for p in parts]
            collect(f.result() for f in futures)
        finally:
            client.close()
    elif workers > 1 and len(pieces) > 1:
        with ProcessPoolExecutor(max_workers=workers, **pool_initializer(_init_worker, (net,))) as pool:
            futures = [pool.submit(_solve_in_worker, *p, powerflow) for p in parts]
            collect(f.result() for f in futures)
    else:
        collect(solve_restoration_chunk(net, *p, powerflow) for p in parts)
    return out


def restore(net: Network, *, pd_mw, qd_mvar, pg_mw, vm_pu, profile: ScoringProfile, workers: int = 1,
            scheduler: str | None = None, progress: Callable[[int, int], None] | None = None,
            keep_state: bool = True) -> Restoration:
    """Run the restoration power flow for stacked samples and check every limit.

    ``pd_mw``, ``qd_mvar`` (n_samples, n_load) [MW, MVAr]; ``pg_mw`` (n_samples, n_gen) [MW];
    ``vm_pu`` (n_samples, n_bus) [p.u.]. ``progress(done, total)`` is called after each chunk.
    With ``keep_state=False`` each chunk is judged as it arrives and only its verdicts and
    restored outputs ``pg_mw`` are kept (the other restored arrays of the result are None):
    the same verdicts, in a fraction of the memory (the scorer's way; the checks are row by
    row, and the cost is computed over all rows at once either way).
    """
    arrays = [np.ascontiguousarray(a, dtype=float) for a in (pd_mw, qd_mvar, pg_mw, vm_pu)]
    n = arrays[0].shape[0]
    if not keep_state and n > 0:
        return _restore_judging_chunks(net, arrays, profile, workers, scheduler, progress)
    got = _run_chunks(net, arrays, dict(profile.powerflow), workers, scheduler, progress)
    if n == 0:
        got = {k: np.zeros((0,)) for k in _FIELDS}
    conv, iterations, state = _outcome(got, n)
    return _in_blocks(net, conv, state, _judge_of(net, profile, conv, iterations, got))


def _outcome(got: dict, n: int):
    """(converged (n,) bool, iterations (n,) int, restored state) from the fields of ``n``
    samples; values of diverged samples are set to NaN in place (no copy)."""
    conv = got["converged"].astype(bool).reshape(n)
    state = {k: np.asarray(got[k], float) for k in _STATE}
    if not conv.all():
        for v in state.values():
            v[~conv] = np.nan
    return conv, got["iterations"].astype(np.int64).reshape(n), state


_STATE = ("vm_pu", "va_deg", "pg_mw", "qg_mvar", "sf_mva", "st_mva")
_JUDGED = ("converged", "iterations", "violations", "causes", "failed", "switched_generators", "ratios", "severity")


def _judge_of(net: Network, profile: ScoringProfile, conv, iterations, got: dict):
    """``judge(rows, state rows)`` of the profile, for samples whose flags are in ``conv``,
    ``iterations`` and ``got`` (the chunk fields)."""
    n = conv.shape[0]
    if profile.grading is None:
        return lambda b, st: _judge(net, conv[b], iterations[b], st, profile)
    unsettled = got.get("unsettled", np.zeros(0, bool)).reshape(n)
    at_limit = got.get("at_q_limit", np.zeros((0, net.n_gen), np.int8)).reshape(n, net.n_gen)
    return lambda b, st: _judge_graded(net, conv[b], unsettled[b], iterations[b], st, at_limit[b], profile)


def _restore_judging_chunks(net, arrays, profile, workers, scheduler, progress) -> Restoration:
    """:func:`restore` with ``keep_state=False``: each chunk judged on arrival (in order)."""
    parts: list[Restoration] = []

    def each(rows: slice, got: dict) -> dict:
        m = rows.stop - rows.start
        conv, iterations, state = _outcome(got, m)
        parts.append(_judge_of(net, profile, conv, iterations, got)(slice(0, m), state))
        return {"converged": conv, "pg_mw": state["pg_mw"]}

    got = _run_chunks(net, arrays, dict(profile.powerflow), workers, scheduler, progress, each)
    conv = got["converged"]
    pg = got["pg_mw"]
    cost = _cost(net, conv, _converged_rows({"pg_mw": pg}, conv))
    return Restoration(vm_pu=None, va_deg=None, pg_mw=pg, qg_mvar=None, sf_mva=None, st_mva=None,
                       cost_per_h=cost, **_joined(parts, _JUDGED))


def _joined(parts: list, names) -> dict:
    """The fields ``names`` of consecutive partial results, concatenated."""
    def joined(get):
        first = get(parts[0])
        if first is None:
            return None
        if isinstance(first, dict):
            return {k: np.concatenate([get(p)[k] for p in parts]) for k in first}
        return np.concatenate([get(p) for p in parts])

    return {k: joined(lambda p, k=k: getattr(p, k)) for k in names}


def _cost(net: Network, conv: np.ndarray, ok: dict) -> np.ndarray:
    """Cost of the restored dispatch (S,) [$/h], NaN where not converged, from the converged rows
    ``ok`` all at once (a matrix product: its rounding may depend on how many rows it gets)."""
    cost = np.full(conv.shape[0], np.nan)
    if net.has_costs:
        cost[conv] = generator_cost_per_h(ok["pg_mw"], cost_c2=net.cost_c2, cost_c1=net.cost_c1, cost_c0=net.cost_c0)
    return cost


def _in_blocks(net: Network, conv: np.ndarray, state: dict, judge) -> Restoration:
    """``judge(rows, state rows)`` on blocks of at most :data:`JUDGE_ROWS` samples, joined: the
    limit checks are elementwise and reduce row by row, so the blocks bound the temporaries
    without changing a value; the cost is computed once over all rows, as without blocks."""
    n = conv.shape[0]
    if n <= JUDGE_ROWS:
        return judge(slice(0, n), state)
    parts = [judge(b, {k: v[b] for k, v in state.items()}) for b in _chunks(n, JUDGE_ROWS)]
    return Restoration(**state, cost_per_h=_cost(net, conv, _converged_rows(state, conv)), **_joined(parts, _JUDGED))


def _converged_rows(state: dict, conv: np.ndarray) -> dict:
    """The rows of converged samples; the arrays themselves (no copy) when every sample converged."""
    if conv.all():
        return state
    return {k: v[conv] for k, v in state.items()}


def causes_of(profile: ScoringProfile) -> dict[str, str]:
    """The failure-cause table a profile reports."""
    return GRADED_CAUSES if profile.grading is not None else CAUSES


def _judge(net: Network, conv: np.ndarray, iterations: np.ndarray, state: dict, profile: ScoringProfile,
           ok: dict | None = None) -> Restoration:
    n = conv.shape[0]
    ok = _converged_rows(state, conv) if ok is None else ok
    fams = {
        "restored_active_power_mw": bound_violation(ok["pg_mw"], net.pmin_mw, net.pmax_mw, input_name="restored pg_mw"),
        "restored_reactive_power_mvar": bound_violation(ok["qg_mvar"], net.qmin_mvar, net.qmax_mvar,
                                                        input_name="restored qg_mvar"),
        "restored_voltage_pu": bound_violation(ok["vm_pu"], net.vmin_pu, net.vmax_pu, input_name="restored vm_pu"),
        "restored_thermal_mva": thermal_overload_mva(ok["sf_mva"], ok["st_mva"], rate_mva=net.rate_mva,
                                                     in_service=net.in_service),
        "restored_thermal_pct": thermal_overload_pct(ok["sf_mva"], ok["st_mva"], rate_mva=net.rate_mva,
                                                     in_service=net.in_service),
        "restored_angle_deg": angle_difference_violation_deg(
            ok["va_deg"], f_idx=net.f_idx, t_idx=net.t_idx, angmin_deg=net.angmin_deg,
            angmax_deg=net.angmax_deg, in_service=net.in_service),
    }
    violations = {}
    for name, vals in fams.items():
        full = np.full(n, np.nan)
        full[conv] = vals
        violations[name] = full
    tol = profile.tolerances
    causes = {"diverged": ~conv}
    for fam, (cause, key) in _FAMILY_CAUSE.items():
        causes[cause] = conv & (np.nan_to_num(violations[fam], nan=0.0) > tol[key])
    causes = {c: causes[c] for c in CAUSES}
    failed = np.logical_or.reduce(list(causes.values()))
    cost = _cost(net, conv, ok)
    return Restoration(converged=conv, iterations=iterations, cost_per_h=cost, violations=violations,
                       causes=causes, failed=failed, **state)


def _judge_graded(net: Network, conv, unsettled, iterations, state: dict, at_limit, profile) -> Restoration:
    """Profile with grading: the families of the strict judge as magnitudes, but violations
    judged element by element against each element's own tolerance (``_grading``)."""
    ok = _converged_rows(state, conv)
    base = _judge(net, conv, iterations, state, profile, ok)
    n = conv.shape[0]
    excess = element_excess(net, profile.tolerances, pg_mw=ok["pg_mw"], qg_mvar=ok["qg_mvar"], vm_pu=ok["vm_pu"],
                            sf_mva=ok["sf_mva"], st_mva=ok["st_mva"], va_deg=ok["va_deg"])
    ratios = tolerance_ratios(excess, n, np.flatnonzero(conv))
    causes = {"diverged": ~conv & ~unsettled, "switching": unsettled}
    for fam, cause in _GRADED_CAUSE.items():
        causes[cause] = conv & (np.nan_to_num(ratios[fam], nan=0.0) > 1.0)
    causes = {c: causes[c] for c in GRADED_CAUSES}
    failed = np.logical_or.reduce(list(causes.values()))
    return Restoration(converged=conv, iterations=iterations, cost_per_h=base.cost_per_h, violations=base.violations,
                       causes=causes, failed=failed, switched_generators=(at_limit != 0).sum(axis=1),
                       ratios=ratios, severity=severity(excess, conv), **state)
