"""Graded verdicts of profiles with grading (``reactive-limits``): per-element tolerances, the
tolerance ratio of each limit family, severity, the tolerance curve and the solved share.

For every element (generator, bus, branch) the excess beyond its limits is compared with the
element's own tolerance and its own scale (docs/metrics.md):

============  ==============================  ====================================
family        tolerance                        scale (severity)
============  ==============================  ====================================
active_power  max(0.1 MW, 1 % of the rating)   the generator's range, at least 1 MW
reactive      max(0.1 MVAr, 1 % of the rating) the generator's range, at least 1 MVAr
voltage       0.001 p.u.                       the bus's band vmax - vmin, at least 0.01 p.u.
thermal       1 % of the rating                the rating
angle         0.1 degree                       the band angmax - angmin (within +-360)
============  ==============================  ====================================

A generator's rating is its apparent-power capability hypot(pmax, max(|qmin|, |qmax|)) [MVA]
(infinite limits left out).

The **tolerance ratio** of a family in a sample is the largest excess / tolerance over its
elements: the sample violates the family when it exceeds 1, and at a tolerance multiple m
when it exceeds m. **Severity** is the largest excess / scale over every family and element,
capped at 1; a restoration that did not converge has severity 1.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from ..network import Network

__all__ = ["GRADED_FAMILIES", "generator_rating_mva", "element_excess", "tolerance_ratios", "severity", "worst_ratio", "failure_at_multiples",
           "solved_shares"]

GRADED_FAMILIES = ("active_power", "reactive_power", "voltage", "thermal", "angle")
_MIN_GEN_SCALE = 1.0  # MW or MVAr
_MIN_VOLTAGE_SCALE_PU = 0.01


def generator_rating_mva(net: Network) -> np.ndarray:
    """Apparent-power capability of each generator, hypot(pmax, max(|qmin|, |qmax|)) over the
    finite limits, shape (n_gen,) [MVA]."""
    def fin(x):
        return np.where(np.isfinite(x), np.abs(x), 0.0)
    return np.hypot(fin(net.pmax_mw), np.maximum(fin(net.qmin_mvar), fin(net.qmax_mvar)))


def _bound_excess(x: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    return np.maximum(np.maximum(lo - x, x - hi), 0.0)


def element_excess(net: Network, tol: Mapping[str, float], *, pg_mw=None, qg_mvar=None, vm_pu=None, sf_mva=None,
                   st_mva=None, va_deg=None) -> dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Per family given: (excess (S, n_e) in the family's unit, tolerance (n_e,), scale (n_e,))."""
    out = {}
    rating = generator_rating_mva(net)
    if pg_mw is not None:
        rng = net.pmax_mw - net.pmin_mw
        out["active_power"] = (_bound_excess(pg_mw, net.pmin_mw, net.pmax_mw),
                               np.maximum(tol["active_power_mw"], tol["active_power_pct_of_rating"] / 100 * rating),
                               np.maximum(rng, _MIN_GEN_SCALE))
    if qg_mvar is not None:
        rng = np.where(np.isfinite(net.qmax_mvar - net.qmin_mvar), net.qmax_mvar - net.qmin_mvar, 0.0)
        out["reactive_power"] = (_bound_excess(qg_mvar, net.qmin_mvar, net.qmax_mvar),
                                 np.maximum(tol["reactive_power_mvar"], tol["reactive_power_pct_of_rating"] / 100 * rating),
                                 np.maximum(rng, _MIN_GEN_SCALE))
    if vm_pu is not None:
        out["voltage"] = (_bound_excess(vm_pu, net.vmin_pu, net.vmax_pu), np.full(net.n_bus, tol["voltage_pu"]),
                          np.maximum(net.vmax_pu - net.vmin_pu, _MIN_VOLTAGE_SCALE_PU))
    if sf_mva is not None:
        rate = np.asarray(net.rate_mva, float)
        limited = np.isfinite(rate) & (rate > 0) & np.asarray(net.in_service, bool)
        r = np.where(limited, rate, 1.0)
        over = np.where(limited, np.maximum(np.maximum(sf_mva, st_mva) - r, 0.0), 0.0)
        out["thermal"] = (over, tol["thermal_pct_of_rating"] / 100 * r, r)
    if va_deg is not None:
        lo, hi = np.asarray(net.angmin_deg, float), np.asarray(net.angmax_deg, float)
        d = va_deg[:, net.f_idx] - va_deg[:, net.t_idx]
        on = np.asarray(net.in_service, bool)
        exc = np.maximum(np.where(lo > -360, lo - d, 0.0), np.where(hi < 360, d - hi, 0.0))
        out["angle"] = (np.where(on, np.maximum(exc, 0.0), 0.0), np.full(net.n_branch, tol["angle_deg"]),
                        np.minimum(hi, 360.0) - np.maximum(lo, -360.0))
    return out


def tolerance_ratios(excess: dict, n: int, rows: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Largest excess / tolerance per family, shape (n,); NaN outside ``rows`` (the samples
    evaluated; None: all)."""
    out = {}
    for fam in GRADED_FAMILIES:
        full = np.full(n, np.nan)
        if fam in excess:
            e, t, _ = excess[fam]
            vals = (e / t).max(axis=1, initial=0.0)
            if rows is None:
                full = vals
            else:
                full[rows] = vals
        out[fam] = full
    return out


def severity(excess: dict, converged: np.ndarray) -> np.ndarray:
    """Largest excess / scale over families and elements, capped at 1; 1 where not converged."""
    n = converged.shape[0]
    worst = np.zeros(int(converged.sum()))
    for e, _, s in excess.values():
        worst = np.maximum(worst, (e / s).max(axis=1, initial=0.0))
    out = np.ones(n)
    out[converged] = np.minimum(worst, 1.0)
    return out


def worst_ratio(ratios: dict[str, np.ndarray]) -> np.ndarray:
    """The largest tolerance ratio over the families per sample, shape (S,); NaN where no family
    was evaluated (a restoration that did not converge)."""
    stacked = np.stack(list(ratios.values()))
    out = np.full(stacked.shape[1], np.nan)
    seen = np.isfinite(stacked).any(axis=0)
    out[seen] = np.nanmax(stacked[:, seen], axis=0)
    return out


def failure_at_multiples(worst: np.ndarray, hard_fail: np.ndarray, multiples) -> np.ndarray:
    """Failure indicator (n_multiples, S): a hard failure, or a worst tolerance ratio (``worst``,
    NaN counting as 0) above the multiple."""
    w = np.nan_to_num(np.asarray(worst, float), nan=0.0)
    return np.asarray(hard_fail, bool)[None, :] | (w[None, :] > np.asarray(multiples, float)[:, None])


def solved_shares(failed: np.ndarray, restored_gap_pct: np.ndarray, thresholds_pct) -> np.ndarray:
    """Share of samples solved at each threshold: restoration passes and |gap| <= threshold."""
    gap = np.abs(np.where(np.isfinite(restored_gap_pct), restored_gap_pct, np.inf))
    ok = ~failed[None, :] & (gap[None, :] <= np.asarray(thresholds_pct, float)[:, None])
    return ok.mean(axis=1) if failed.size else np.zeros(len(thresholds_pct))
