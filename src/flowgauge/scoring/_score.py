"""``score``: predictions + split -> scorecard. Raw metrics, restoration, aggregation."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from .. import __version__
from ..errors import InputError
from ..network import Network
from ._aggregate import bootstrap_ci, summary_stats, violation_stats
from ._metrics import (active_balance_residual_mw, angle_difference_violation_deg, balance_residuals,
                       bound_violation, branch_flows_mva, generator_cost_per_h, optimality_gap_pct,
                       thermal_overload_mva, thermal_overload_pct)
from ._profile import ScoringProfile, get_profile
from ._grading import element_excess, failure_at_multiples, solved_shares, tolerance_ratios, worst_ratio
from ._restoration import causes_of, restore
from ._scorecard import FORMAT_NAME, FORMAT_VERSION, GRADED_FORMAT_VERSION, STATE_FORMAT_VERSION, Scorecard
from ._state import StateGroups, per_group, restore_in_states, state_groups

__all__ = ["score", "score_arrays", "RAW_FAMILIES", "RESTORED_FAMILIES", "FAMILY_TOLERANCE"]

# Violation family -> profile tolerance key judging "violating" (thermal MVA is judged on % of rating).
FAMILY_TOLERANCE = {
    "raw_active_power_mw": "active_power_mw",
    "raw_voltage_pu": "voltage_pu",
    "raw_reactive_power_mvar": "reactive_power_mvar",
    "raw_balance_mw": "balance_mw",
    "raw_balance_mvar": "balance_mvar",
    "raw_thermal_mva": "thermal_pct_of_rating",
    "raw_thermal_pct": "thermal_pct_of_rating",
    "raw_angle_deg": "angle_deg",
    "restored_active_power_mw": "active_power_mw",
    "restored_voltage_pu": "voltage_pu",
    "restored_reactive_power_mvar": "reactive_power_mvar",
    "restored_thermal_mva": "thermal_pct_of_rating",
    "restored_thermal_pct": "thermal_pct_of_rating",
    "restored_angle_deg": "angle_deg",
}
RAW_FAMILIES = tuple(k for k in FAMILY_TOLERANCE if k.startswith("raw_"))
RESTORED_FAMILIES = tuple(k for k in FAMILY_TOLERANCE if k.startswith("restored_"))
# Violation family -> graded family judging it element by element (profiles with grading)
_GRADED_FAMILY = {
    "active_power_mw": "active_power", "reactive_power_mvar": "reactive_power", "voltage_pu": "voltage",
    "thermal_mva": "thermal", "thermal_pct": "thermal", "angle_deg": "angle",
}


def _resolve(predictions, split):
    """Validate (schema, then against the split) and return the predictions and the split with
    its references."""
    from ..splits import load_split
    from ..submission import check_predictions

    if isinstance(split, (str, os.PathLike)):
        split = load_split(Path(split))
    report = check_predictions(predictions, split)
    preds, split = report.predictions, report.split
    if split.references is None:
        split = load_split(split.path)
    if split.references is None:
        raise InputError("the split has no reference solutions (a published split); scoring needs them",
                         where=str(split.path))
    return preds, split


def _optional(a) -> np.ndarray | None:
    return None if a is None else np.asarray(a, float)


def _raw_metrics(net: Network, pd_mw, qd_mvar, pg, vm, va, qg) -> dict[str, np.ndarray]:
    n = pg.shape[0]
    nan = np.full(n, np.nan)
    fam = {
        "raw_active_power_mw": bound_violation(pg, net.pmin_mw, net.pmax_mw, input_name="pg_mw"),
        "raw_voltage_pu": bound_violation(vm, net.vmin_pu, net.vmax_pu, input_name="vm_pu"),
        "raw_reactive_power_mvar": nan if qg is None else bound_violation(qg, net.qmin_mvar, net.qmax_mvar,
                                                                          input_name="qg_mvar"),
    }
    full = va is not None and qg is not None
    if full:
        mis = balance_residuals(net, pd_mw=pd_mw, qd_mvar=qd_mvar, pg_mw=pg, qg_mvar=qg, vm_pu=vm, va_deg=va)
        sf, st = branch_flows_mva(net, vm_pu=vm, va_deg=va)
        fam["raw_balance_mw"] = np.abs(mis.real).max(axis=1)
        fam["raw_balance_mvar"] = np.abs(mis.imag).max(axis=1)
        fam["raw_thermal_mva"] = thermal_overload_mva(sf, st, rate_mva=net.rate_mva, in_service=net.in_service)
        fam["raw_thermal_pct"] = thermal_overload_pct(sf, st, rate_mva=net.rate_mva, in_service=net.in_service)
        fam["raw_angle_deg"] = angle_difference_violation_deg(
            va, f_idx=net.f_idx, t_idx=net.t_idx, angmin_deg=net.angmin_deg, angmax_deg=net.angmax_deg,
            in_service=net.in_service)
    else:
        for k in ("raw_balance_mw", "raw_balance_mvar", "raw_thermal_mva", "raw_thermal_pct", "raw_angle_deg"):
            fam[k] = nan
    return fam


def _violating(fams: dict[str, np.ndarray], tol: dict[str, float], ratios: dict | None = None) -> dict[str, np.ndarray]:
    """Per family, samples beyond tolerance. ``ratios`` ({"raw": ..., "restored": ...} tolerance
    ratios by graded family): judge those families element by element instead."""
    out = {}
    for k, v in fams.items():
        stage, _, rest = k.partition("_")
        if ratios is not None and rest in _GRADED_FAMILY:
            out[k] = np.nan_to_num(ratios[stage][_GRADED_FAMILY[rest]], nan=0.0) > 1.0
            continue
        judge = fams[k.replace("_mva", "_pct")] if k.endswith("_thermal_mva") else v
        out[k] = np.nan_to_num(judge, nan=0.0) > tol[FAMILY_TOLERANCE[k]]
    return out


def _raw_ratios(net: Network, tol, pg, vm, va, qg) -> dict[str, np.ndarray]:
    full = va is not None and qg is not None
    sf = st = None
    if full:
        sf, st = branch_flows_mva(net, vm_pu=vm, va_deg=va)
    excess = element_excess(net, tol, pg_mw=pg, qg_mvar=qg, vm_pu=vm, sf_mva=sf, st_mva=st,
                            va_deg=va if full else None)
    return tolerance_ratios(excess, pg.shape[0])


def _reference_ms(split) -> float | None:
    rs = (split.manifest or {}).get("reference_solve_seconds") if isinstance(split.manifest, dict) else None
    med = rs.get("median") if isinstance(rs, dict) else None
    return None if med is None or not np.isfinite(med) else 1000.0 * float(med)


def _inference(ms: np.ndarray | None) -> dict[str, float] | None:
    if ms is None:
        return None
    v = ms[np.isfinite(ms)]
    if v.size == 0:
        return None
    return {"mean": float(v.mean()), "p95": float(np.percentile(v, 95))}


def _aggregates(table: pd.DataFrame, fams: dict, viol: dict, restoration, ref_ms, profile) -> dict:
    n = len(table)
    inf = _inference(table["inference_ms"].to_numpy())
    speed = None if inf is None or ref_ms is None or inf["mean"] <= 0 else ref_ms / inf["mean"]
    boot = profile.bootstrap
    ci = bootstrap_ci({"restoration_failure_rate": restoration.failed.astype(float),
                       "restored_gap_pct_mean": table["restored_gap_pct"].to_numpy()},
                      resamples=int(boot["resamples"]), seed=int(boot["seed"]), level=float(boot["level"]))
    return {
        "samples": n,
        "restoration_failure_rate": float(restoration.failed.mean()) if n else None,
        "restoration_failure_causes": {c: float(restoration.causes[c].mean()) for c in causes_of(profile)},
        "raw_gap_pct": summary_stats(table["raw_gap_pct"].to_numpy()),
        "restored_gap_pct": summary_stats(table["restored_gap_pct"].to_numpy()),
        "violations": {k: violation_stats(fams[k], viol[k]) for k in FAMILY_TOLERANCE},
        "inference_ms": inf,
        "reference_solve_ms_median": ref_ms,
        "speedup_indicative": speed,
        "ci95": ci,
    }


def _graded_aggregates(table: pd.DataFrame, restoration, profile) -> dict:
    """Aggregates of profiles with grading: severity, the tolerance curve, the solved share and
    its curve (as for any group of samples), switched generators and the bootstrap intervals."""
    g = profile.grading
    boot = profile.bootstrap
    ci = bootstrap_ci({"severity_mean": restoration.severity, "solved_share": table["solved"].to_numpy(float)},
                      resamples=int(boot["resamples"]), seed=int(boot["seed"]), level=float(boot["level"]))
    switched = summary_stats(restoration.switched_generators.astype(float))
    every = _group_aggregates(table, np.ones(len(table), bool), profile)
    return {
        **{k: every[k] for k in ("severity", "tolerance_curve", "solved_share", "solved_curve")},
        "switched_generators": None if switched is None else {"mean": switched["mean"], "max": switched["max"]},
        "solved_threshold_pct": float(g["solved_threshold_pct"]),
        "ci95_graded": ci,
    }


def _group_aggregates(table: pd.DataFrame, mask: np.ndarray, profile) -> dict:
    """The main aggregates over the samples in ``mask`` (breakdowns by regime and kind), from
    the per-sample table alone: counts, failure rate and causes, gaps, severity, the solved
    share and both curves."""
    t = table[mask]
    n = int(mask.sum())
    g = profile.grading
    failed = t["restoration_failed"].to_numpy(bool)
    hard = (t["cause_diverged"] | t["cause_switching"]).to_numpy(bool)
    sev = t["severity"].to_numpy(float)
    multiples = list(g["tolerance_multiples"])
    thresholds = list(g["solved_thresholds_pct"])
    causes = [c[len("cause_"):] for c in t.columns if c.startswith("cause_")]
    return {
        "samples": n,
        "restoration_failure_rate": float(failed.mean()) if n else None,
        "restoration_failure_causes": {c: float(t[f"cause_{c}"].mean()) if n else None for c in causes},
        "raw_gap_pct": summary_stats(t["raw_gap_pct"].to_numpy()),
        "restored_gap_pct": summary_stats(t["restored_gap_pct"].to_numpy()),
        "severity": {"mean": float(sev.mean()), "p95": float(np.percentile(sev, 95)), "max": float(sev.max())}
        if n else None,
        "solved_share": float(t["solved"].mean()) if n else None,
        "solved_curve": {"thresholds_pct": thresholds, "share": [float(x) for x in solved_shares(
            failed, t["restored_gap_pct"].to_numpy(float), thresholds)] if n else None},
        "tolerance_curve": {"multiples": multiples, "failure_rate": [float(x) for x in failure_at_multiples(
            t["tolerance_ratio"].to_numpy(float), hard, multiples).mean(axis=1)] if n else None},
    }


def _breakdowns(table: pd.DataFrame, profile, regime_seen_in_train, kind) -> dict:
    out = {}
    if regime_seen_in_train is not None:
        seen = np.asarray(regime_seen_in_train, bool)
        out["by_regime_seen_in_train"] = {"seen": _group_aggregates(table, seen, profile),
                                          "unseen": _group_aggregates(table, ~seen, profile)}
    if kind is not None:
        k = np.asarray(kind).astype(str)
        out["by_kind"] = {name: _group_aggregates(table, k == name, profile) for name in sorted(set(k.tolist()))}
    return out


def _plain_group(table: pd.DataFrame, mask: np.ndarray) -> dict:
    """The aggregates of profiles without grading over the samples in ``mask``: counts, failure
    rate and causes, gaps (the breakdown by outage kind of such profiles)."""
    t = table[mask]
    n = int(mask.sum())
    causes = [c[len("cause_"):] for c in t.columns if c.startswith("cause_")]
    return {
        "samples": n,
        "restoration_failure_rate": float(t["restoration_failed"].to_numpy(bool).mean()) if n else None,
        "restoration_failure_causes": {c: float(t[f"cause_{c}"].mean()) if n else None for c in causes},
        "raw_gap_pct": summary_stats(t["raw_gap_pct"].to_numpy()),
        "restored_gap_pct": summary_stats(t["restored_gap_pct"].to_numpy()),
    }


def _by_outage(table: pd.DataFrame, profile, kind: np.ndarray) -> dict:
    """Aggregates per outage kind present (``intact``, ``branch out``, ``generator out``, ...)."""
    group = _group_aggregates if profile.grading is not None else (lambda t, m, p: _plain_group(t, m))
    return {name: group(table, kind == name, profile) for name in sorted(set(kind.tolist()))}


def _raw_in_states(groups: StateGroups, prof, pd_mw, qd_mvar, pg, vm, va, qg):
    """Raw cost, raw families and (with grading) raw tolerance ratios, each group of samples on
    its state network: a generator out is judged against its [0, 0] limits and costs nothing."""
    def one(n: Network, r: np.ndarray) -> dict:
        def rows(a):
            return None if a is None else a[r]
        out = {"cost": generator_cost_per_h(pg[r], cost_c2=n.cost_c2, cost_c1=n.cost_c1, cost_c0=n.cost_c0),
               "fams": _raw_metrics(n, pd_mw[r], qd_mvar[r], pg[r], vm[r], rows(va), rows(qg))}
        if prof.grading is not None:
            out["ratios"] = _raw_ratios(n, prof.tolerances, pg[r], vm[r], rows(va), rows(qg))
        return out
    got = per_group(groups, one)
    return got["cost"], got["fams"], got.get("ratios")


def _header(split, preds, profile: ScoringProfile, states: bool = False) -> dict[str, Any]:
    model = preds.header.get("model") if isinstance(preds.header, dict) else None
    version = FORMAT_VERSION if profile.grading is None else GRADED_FORMAT_VERSION
    return {
        "format": FORMAT_NAME,
        "format_version": STATE_FORMAT_VERSION if states else version,
        "flowgauge_version": __version__,
        "split": {"network": split.network_name, "split": split.name, "split_hash": split.split_hash},
        "predictions_hash": preds.content_hash,
        "profile": profile.to_dict(),
        "model": model if isinstance(model, dict) else {},
    }


def score_arrays(net: Network, *, sample_id, pd_mw, qd_mvar, reference_cost_per_h, pg_mw, vm_pu, va_deg=None,
                 qg_mvar=None, inference_ms=None, reference_solve_ms: float | None = None,
                 profile: str | ScoringProfile | None = None, workers: int = 1, scheduler: str | None = None,
                 progress: Callable[[int, int], None] | None = None, regime_seen_in_train=None,
                 kind=None, branch_in_service=None, gen_in_service=None,
                 shunt_in_service=None) -> tuple[dict, pd.DataFrame]:
    """The scorer's core on arrays already checked and aligned, rows sorted by ``sample_id``.

    ``pd_mw``, ``qd_mvar`` (S, n_load) [MW, MVAr]; ``reference_cost_per_h`` (S,) [$/h];
    ``pg_mw`` (S, n_gen) [MW]; ``vm_pu`` (S, n_bus) [p.u.]; optional ``va_deg`` (S, n_bus) [deg],
    ``qg_mvar`` (S, n_gen) [MVAr], ``inference_ms`` (S,) [ms] (NaN: not reported);
    ``reference_solve_ms``: the reference solver's median time per sample [ms];
    ``regime_seen_in_train`` (S,) bool and ``kind`` (S,) str, optional: with a grading profile,
    the aggregates are also broken down by them (``by_regime_seen_in_train``, ``by_kind``).
    ``branch_in_service`` (S, n_branch) and ``gen_in_service`` (S, n_gen) bool, optional: each
    sample's network state (docs/topology.md); every metric, the restoration and every limit
    check then run on each sample's state network (``_state``), the predicted setpoints of
    generators out are set to 0 before the restoration, the table gains ``outage`` and the
    aggregates ``by_outage``. ``shunt_in_service`` (S, n_bus) bool, optional, with them: which
    bus shunts are connected in each sample. Returns (aggregates, per-sample table).
    """
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise InputError(f"The 'workers' parameter of score must be an integer >= 1. Got {workers!r} instead.",
                         where="workers")
    prof = get_profile(profile)
    if not net.has_costs:
        raise InputError("the network has no generator costs, so the optimality gap is undefined",
                         where=f"network {net.name}")
    sid = np.asarray(sample_id)
    pd_mw, qd_mvar = np.asarray(pd_mw, float), np.asarray(qd_mvar, float)
    ref_cost = np.asarray(reference_cost_per_h, float)
    pg, vm = np.asarray(pg_mw, float), np.asarray(vm_pu, float)
    va, qg = _optional(va_deg), _optional(qg_mvar)
    inference = _optional(inference_ms)

    groups = None
    if shunt_in_service is not None and (branch_in_service is None or gen_in_service is None):
        raise InputError("bus shunt flags are part of a per-sample state: give branch_in_service and "
                         "gen_in_service with them", where="shunt_in_service")
    if branch_in_service is not None or gen_in_service is not None:  # checked before anything is computed
        groups = state_groups(net, branch_in_service, gen_in_service, sid, shunt_in_service)
    raw_ratios = None
    if groups is None:
        raw_cost = generator_cost_per_h(pg, cost_c2=net.cost_c2, cost_c1=net.cost_c1, cost_c0=net.cost_c0)
        fams = _raw_metrics(net, pd_mw, qd_mvar, pg, vm, va, qg)
        rest = restore(net, pd_mw=pd_mw, qd_mvar=qd_mvar, pg_mw=pg, vm_pu=vm, profile=prof, workers=int(workers),
                       scheduler=scheduler, progress=progress, keep_state=False)
    else:
        raw_cost, fams, raw_ratios = _raw_in_states(groups, prof, pd_mw, qd_mvar, pg, vm, va, qg)
        rest = restore_in_states(net, groups, pd_mw=pd_mw, qd_mvar=qd_mvar, pg_mw=pg, vm_pu=vm, profile=prof,
                                 workers=int(workers), scheduler=scheduler, progress=progress)
    fams.update(rest.violations)
    ratios = None
    if prof.grading is not None:
        if raw_ratios is None:
            raw_ratios = _raw_ratios(net, prof.tolerances, pg, vm, va, qg)
        ratios = {"raw": raw_ratios, "restored": rest.ratios}
    viol = _violating(fams, dict(prof.tolerances), ratios)
    restored_gap = np.full(sid.size, np.nan)
    conv = rest.converged
    if conv.any():
        restored_gap[conv] = optimality_gap_pct(rest.cost_per_h[conv], ref_cost[conv])
    table = pd.DataFrame({
        "sample_id": sid,
        "reference_cost_per_h": ref_cost,
        "raw_cost_per_h": raw_cost,
        "raw_gap_pct": optimality_gap_pct(raw_cost, ref_cost),
        **{k: fams[k] for k in RAW_FAMILIES},
        "restoration_converged": conv,
        "restoration_iterations": rest.iterations,
        "restoration_failed": rest.failed,
        **{f"cause_{c}": rest.causes[c] for c in causes_of(prof)},
        "restored_cost_per_h": rest.cost_per_h,
        "restored_gap_pct": restored_gap,
        **{k: fams[k] for k in RESTORED_FAMILIES},
        "inference_ms": inference if inference is not None else np.full(sid.size, np.nan),
    })
    aggregates = _aggregates(table, fams, viol, rest, reference_solve_ms, prof)
    if prof.grading is not None:
        table["switched_generators"] = rest.switched_generators
        table["tolerance_ratio"] = np.where(conv, worst_ratio(rest.ratios), np.nan)
        table["severity"] = rest.severity
        limit = float(prof.grading["solved_threshold_pct"])
        table["solved"] = ~rest.failed & (np.abs(np.nan_to_num(restored_gap, nan=np.inf)) <= limit)
        aggregates.update(_graded_aggregates(table, rest, prof))
        aggregates.update(_breakdowns(table, prof, regime_seen_in_train, kind))
    if groups is not None:
        table["outage"] = groups.kind
        aggregates["by_outage"] = _by_outage(table, prof, groups.kind)
    return aggregates, table


def score(predictions, split=None, *, profile: str | ScoringProfile | None = None, workers: int = 1,
          scheduler: str | None = None, progress: Callable[[int, int], None] | None = None) -> Scorecard:
    """Score a predictions file (a path or a loaded ``Predictions``) against its split.

    ``split``: a loaded ``Split``, a split folder, or None to find the split from the split hash
    in the predictions header. ``profile``: a scoring profile or its name (``default``).
    ``workers``: local processes for the restoration power flows; ``scheduler``: the address of
    a Dask scheduler to spread them over instead. ``progress(done, total)`` is called as the
    restoration power flows finish. A split with per-sample network states is scored on each
    sample's state network (scorecard format 3, docs/metrics.md). The scorecard is the same
    bytes whatever ``workers`` and ``scheduler``. Bad input raises InputError before anything is
    computed or written.
    """
    prof = get_profile(profile)
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise InputError(f"The 'workers' parameter of score must be an integer >= 1. Got {workers!r} instead.",
                         where="workers")
    preds, split = _resolve(predictions, split)
    sid = np.asarray(split.sample_id)
    order = np.argsort(sid, kind="stable")
    sid = sid[order]
    pos = {v: i for i, v in enumerate(np.asarray(preds.sample_id).tolist())}
    take = np.fromiter((pos[v] for v in sid.tolist()), dtype=np.int64, count=sid.size)

    def pick(a):
        return None if a is None else np.asarray(a, float)[take]

    aggregates, table = score_arrays(
        split.network, sample_id=sid, pd_mw=np.asarray(split.pd_mw, float)[order],
        qd_mvar=np.asarray(split.qd_mvar, float)[order],
        reference_cost_per_h=np.asarray(split.references.objective, float)[order],
        pg_mw=pick(preds.pg_mw), vm_pu=pick(preds.vm_pu), va_deg=pick(preds.va_deg), qg_mvar=pick(preds.qg_mvar),
        inference_ms=pick(preds.inference_ms), reference_solve_ms=_reference_ms(split), profile=prof,
        workers=workers, scheduler=scheduler, progress=progress,
        regime_seen_in_train=None if split.references.regime_seen_in_train is None
        else np.asarray(split.references.regime_seen_in_train)[order],
        kind=None if getattr(split, "kind", None) is None else np.asarray(split.kind)[order],
        **_states_of(split, order))
    return Scorecard(header=_header(split, preds, prof, states=_states_of(split, order) != {}),
                     aggregates=aggregates, per_sample=table)


def _states_of(split, order: np.ndarray) -> dict:
    """The split's per-sample states in ``order`` as keyword arguments of :func:`score_arrays`
    (none for a split whose samples all run on the network as it is)."""
    br = getattr(split, "branch_in_service", None)
    if br is None:
        return {}
    out = {"branch_in_service": np.asarray(br)[order], "gen_in_service": np.asarray(split.gen_in_service)[order]}
    shunt = getattr(split, "shunt_in_service", None)
    if shunt is not None:
        out["shunt_in_service"] = np.asarray(shunt)[order]
    return out
