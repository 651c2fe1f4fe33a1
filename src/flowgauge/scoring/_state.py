"""Scoring samples that run on different network states (splits with ``branch_in_service`` /
``gen_in_service`` columns, and optionally ``shunt_in_service``; docs/topology.md).

Samples are grouped by state (:func:`flowgauge.network.group_states`); every metric, the
restoration power flow and every limit check of a group run on that state's network
(:func:`flowgauge.network.network_in_state`: same shapes and element order, an element out
reads as zero). Before the restoration, the predicted setpoints of generators out of service
are set to 0 (a submitter's value there is ignored); the raw metrics judge the prediction as
given, so a nonzero output predicted at a generator that is out violates its [0, 0] limits
(docs/metrics.md, "Splits with network states").

Restoration chunks: each group's samples, in ``sample_id`` order, in chunks of the profile's
size; groups in order of first appearance. The chunks depend on the inputs only, so the
results are the same bytes whatever the number of workers.
"""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .._workers import pool_initializer
from ..network import Network
from ..network._state import check_states, group_states, network_in_state
from ._restoration import (CHUNK_SAMPLES, Restoration, _connect, _in_blocks, _judge, _judge_graded,
                           solve_restoration_chunk)

__all__ = ["OUTAGE_KINDS", "StateGroups", "state_groups", "outage_kinds", "zero_out_generators",
           "restore_in_states", "per_group"]

# The kind of each sample's state, against the network as it is.
OUTAGE_KINDS = ("intact", "branch out", "generator out", "branch and generator out")


@dataclass(frozen=True, eq=False)
class StateGroups:
    """Samples grouped by state: ``networks`` (K,) the state networks, ``branch`` (K, n_branch)
    and ``gen`` (K, n_gen) bool flags, ``rows`` (K,) the sample rows of each group (ascending),
    ``kind`` (S,) str the outage kind of each sample (:data:`OUTAGE_KINDS`), ``shunt`` (K, n_bus)
    bool the bus shunt flags of each group (None: the network's shunts in every sample)."""

    networks: tuple
    branch: np.ndarray
    gen: np.ndarray
    rows: tuple
    kind: np.ndarray
    shunt: np.ndarray | None = None

    @property
    def n_samples(self) -> int:
        return int(self.kind.shape[0])


def outage_kinds(net: Network, branch_in_service, gen_in_service) -> np.ndarray:
    """The outage kind of each sample, shape (S,) str: ``intact``, ``branch out`` (one or more
    branches out, every generator in), ``generator out`` or ``branch and generator out``."""
    br_out = (np.asarray(net.in_service, bool) & ~np.asarray(branch_in_service, bool)).any(axis=1)
    gen_out = (~np.asarray(gen_in_service, bool)).any(axis=1)
    return np.asarray(OUTAGE_KINDS, dtype=object)[br_out.astype(int) + 2 * gen_out.astype(int)].astype(str)


def state_groups(net: Network, branch_in_service, gen_in_service, sample_id, shunt_in_service=None) -> StateGroups:
    """Check the flags of every sample (errors name the first sample with a refused state and
    the element) and group the samples by state (branch, generator and, when given, bus shunt
    flags)."""
    br, gen = check_states(net, branch_in_service, gen_in_service, sample_id, shunt_in_service=shunt_in_service)
    more = () if shunt_in_service is None else (np.asarray(shunt_in_service, bool),)
    ub, ug, *us, group = group_states(br, gen, *more)
    shunt = us[0] if us else None
    rows = tuple(np.flatnonzero(group == k) for k in range(ub.shape[0]))
    nets = tuple(network_in_state(net, ub[k], ug[k], shunt_in_service=None if shunt is None else shunt[k])
                 for k in range(ub.shape[0]))
    return StateGroups(networks=nets, branch=ub, gen=ug, rows=rows, kind=outage_kinds(net, br, gen), shunt=shunt)


def zero_out_generators(groups: StateGroups, pg_mw: np.ndarray) -> np.ndarray:
    """A copy of ``pg_mw`` (S, n_gen) [MW] with every generator out of service in its
    sample's state at 0."""
    out = np.array(pg_mw, float)
    for k, rows in enumerate(groups.rows):
        off = ~groups.gen[k]
        if off.any():
            out[np.ix_(rows, np.flatnonzero(off))] = 0.0
    return out


def per_group(groups: StateGroups, fn: Callable[[Network, np.ndarray], dict]) -> dict:
    """``fn(state network, rows)`` for every group, its outputs (dicts of arrays or of dicts of
    arrays, first axis the group's samples, or None) put back in sample order."""
    out: dict = {}
    n = groups.n_samples

    def place(dst: dict, key, value, rows):
        if value is None:
            dst[key] = None
            return
        if isinstance(value, dict):
            sub = dst.setdefault(key, {})
            for k, v in value.items():
                place(sub, k, v, rows)
            return
        v = np.asarray(value)
        if key not in dst:
            dst[key] = np.full((n,) + v.shape[1:], np.nan) if v.dtype.kind == "f" else np.zeros((n,) + v.shape[1:],
                                                                                                  v.dtype)
        dst[key][rows] = v

    for net_k, rows in zip(groups.networks, groups.rows):
        got = fn(net_k, rows)
        for key, value in got.items():
            place(out, key, value, rows)
    return out


# ---- restoration ---------------------------------------------------------------------------

_WORKER_BASE: Network | None = None
_WORKER_NETS: dict = {}


def _init_worker(net: Network) -> None:
    global _WORKER_BASE
    _WORKER_BASE = net
    _WORKER_NETS.clear()


def _solve_in_worker(branch, gen, shunt, pd_mw, qd_mvar, pg_mw, vm_pu, powerflow: dict) -> dict[str, np.ndarray]:
    # one state network per state in each worker process, so the power flow's per-network
    # preparation is reused by every chunk of that state the process solves
    key = (branch.tobytes(), gen.tobytes(), None if shunt is None else shunt.tobytes())
    net = _WORKER_NETS.get(key)
    if net is None:
        net = _WORKER_NETS[key] = network_in_state(_WORKER_BASE, branch, gen, shunt_in_service=shunt)
    return solve_restoration_chunk(net, pd_mw, qd_mvar, pg_mw, vm_pu, powerflow)


# Groups of fewer samples than this solve their Newton steps with one SuperLU factorisation per
# sample (the power flow's ``linear="loop"``) instead of the LU vectorised across samples, whose
# schedule is built once per network and Jacobian pattern (tens of ms on ieee118) and pays off
# only over many samples. The choice depends on the group's size alone, so the scorecard is
# still the same bytes whatever the number of workers.
LOOP_BELOW = 32


def _tasks(groups: StateGroups, size: int) -> list[tuple[int, np.ndarray]]:
    tasks = []
    for k, rows in enumerate(groups.rows):
        tasks += [(k, rows[i:i + size]) for i in range(0, rows.size, size)]
    return tasks


def _settings(powerflow: dict, group_size: int) -> dict:
    return {**powerflow, "linear": "loop"} if group_size < LOOP_BELOW else powerflow


def restore_in_states(net: Network, groups: StateGroups, *, pd_mw, qd_mvar, pg_mw, vm_pu, profile,
                      workers: int = 1, scheduler: str | None = None,
                      progress: Callable[[int, int], None] | None = None) -> Restoration:
    """The restoration of :func:`flowgauge.scoring.restore`, each sample on its state network,
    with the setpoints of generators out set to 0 first. Arrays as there, rows in
    ``sample_id`` order."""
    arrays = [np.ascontiguousarray(a, dtype=float) for a in (pd_mw, qd_mvar, zero_out_generators(groups, pg_mw),
                                                             vm_pu)]
    n = arrays[0].shape[0]
    powerflow = dict(profile.powerflow)
    tasks = _tasks(groups, int(powerflow.get("chunk_samples", CHUNK_SAMPLES)))
    got: dict[str, np.ndarray] = {}
    done = 0

    def collect(rows, res):
        nonlocal done
        for key, v in res.items():
            if key not in got:
                got[key] = np.empty((n,) + v.shape[1:], v.dtype)
            got[key][rows] = v
        done += rows.size
        if progress is not None:
            progress(done, n)

    if scheduler is not None:
        client = _connect(scheduler)
        try:
            nets = client.scatter(list(groups.networks), broadcast=True)
            futures = [client.submit(solve_restoration_chunk, nets[k], *(a[rows] for a in arrays),
                                     _settings(powerflow, groups.rows[k].size), pure=False) for k, rows in tasks]
            for (k, rows), f in zip(tasks, futures):
                collect(rows, f.result())
        finally:
            client.close()
    elif workers > 1 and len(tasks) > 1:
        with ProcessPoolExecutor(max_workers=workers, **pool_initializer(_init_worker, (net,))) as pool:
            futures = [pool.submit(_solve_in_worker, groups.branch[k], groups.gen[k],
                                   None if groups.shunt is None else groups.shunt[k], *(a[rows] for a in arrays),
                                   _settings(powerflow, groups.rows[k].size)) for k, rows in tasks]
            for (k, rows), f in zip(tasks, futures):
                collect(rows, f.result())
    else:
        for k, rows in tasks:
            collect(rows, solve_restoration_chunk(groups.networks[k], *(a[rows] for a in arrays),
                                                  _settings(powerflow, groups.rows[k].size)))
    return _judged(groups, got, profile)


def _judged(groups: StateGroups, got: dict, profile) -> Restoration:
    """Every limit checked on each group's own state network, the results put back in order."""
    n = groups.n_samples
    conv_all = got["converged"].astype(bool).reshape(n)
    iters_all = got["iterations"].astype(np.int64).reshape(n)
    fields = ("vm_pu", "va_deg", "pg_mw", "qg_mvar", "sf_mva", "st_mva")
    state_all = {k: np.asarray(got[k], float) for k in fields}
    for v in state_all.values():
        v[~conv_all] = np.nan
    graded = profile.grading is not None

    def judge(net_k: Network, rows: np.ndarray) -> dict:
        conv, iters = conv_all[rows], iters_all[rows]
        st = {k: v[rows] for k, v in state_all.items()}
        if graded:
            unsettled = got["unsettled"].reshape(n)[rows]
            at_limit = got["at_q_limit"].reshape(n, net_k.n_gen)[rows]
            r = _in_blocks(net_k, conv, st, lambda b, s: _judge_graded(net_k, conv[b], unsettled[b], iters[b], s,
                                                                        at_limit[b], profile))
        else:
            r = _in_blocks(net_k, conv, st, lambda b, s: _judge(net_k, conv[b], iters[b], s, profile))
        return {"cost_per_h": r.cost_per_h, "violations": r.violations, "causes": r.causes, "failed": r.failed,
                "switched_generators": r.switched_generators, "ratios": r.ratios, "severity": r.severity}

    j = per_group(groups, judge)
    causes = {c: v.astype(bool) for c, v in j["causes"].items()}
    return Restoration(converged=conv_all, iterations=iters_all, cost_per_h=j["cost_per_h"],
                       violations=j["violations"], causes=causes, failed=j["failed"].astype(bool),
                       switched_generators=j["switched_generators"], ratios=j["ratios"], severity=j["severity"],
                       **state_all)
