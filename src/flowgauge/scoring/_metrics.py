"""Per-sample metric functions on stacked samples.

Every metric takes arrays of shape (n_samples, n_x) and returns one value per sample, shape
(n_samples,). Lower is better for all of them except the optimality gap, where closer to 0 is
better (a negative gap means cheaper than the optimum, which only a limit violation allows);
0 is the best value of every violation.
Inputs pass one gate, :func:`check_stacked`, which rejects wrong shapes and non-finite values.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..errors import InputError
from ..network import Network
from ..physics import admittance

__all__ = [
    "check_stacked", "generator_cost_per_h", "optimality_gap_pct", "bound_violation",
    "balance_residuals", "active_balance_residual_mw", "reactive_balance_residual_mvar",
    "branch_flows_mva", "thermal_overload_mva", "thermal_overload_pct",
    "angle_difference_violation_deg", "Metric", "METRICS",
]


def check_stacked(x, input_name: str, n_cols: int | None = None, *, ndim: int = 2) -> np.ndarray:
    """The one input gate: a finite float array of shape (n_samples, n_cols) (or (n_samples,)
    with ``ndim=1``). Raises InputError naming the input, the expected and the actual shape."""
    a = np.asarray(x, dtype=float) if not isinstance(x, np.ndarray) or x.dtype != float else x
    if a.ndim != ndim:
        want = "(n_samples,)" if ndim == 1 else f"(n_samples, {n_cols if n_cols is not None else 'n'})"
        raise InputError(f"expected an array of shape {want}, got shape {a.shape}; stack one row per sample",
                         where=input_name)
    if ndim == 2 and n_cols is not None and a.shape[1] != n_cols:
        raise InputError(f"expected {n_cols} columns, got shape {a.shape}; columns follow the network's "
                         "element order", where=input_name)
    bad = ~np.isfinite(a)
    if bad.any():
        row = int(np.argwhere(bad)[0][0])
        raise InputError(f"{int(bad.sum())} non-finite value(s) (NaN or infinity), first in sample row {row}; "
                         "every value must be a finite number", where=input_name)
    return a


def generator_cost_per_h(pg_mw, *, cost_c2, cost_c1, cost_c0) -> np.ndarray:
    """Generation cost sum(c2 pg^2 + c1 pg + c0) [$/h], shape (n_samples,).

    ``pg_mw`` shape (n_samples, n_gen) [MW]; cost coefficients shape (n_gen,) [$/MW^2h, $/MWh, $/h].
    """
    c2 = np.asarray(cost_c2, float)
    pg = check_stacked(pg_mw, "pg_mw", c2.shape[0])
    return (pg * pg) @ c2 + pg @ np.asarray(cost_c1, float) + float(np.sum(cost_c0))


def optimality_gap_pct(cost_per_h, reference_cost_per_h) -> np.ndarray:
    """Optimality gap 100 (cost - C*) / |C*| [%], shape (n_samples,). Closer to 0 is better; 0
    matches the reference; negative means cheaper than the reference (only possible by
    violating a limit or the physics)."""
    cost = check_stacked(cost_per_h, "cost_per_h", ndim=1)
    ref = check_stacked(reference_cost_per_h, "reference_cost_per_h", ndim=1)
    if ref.shape != cost.shape:
        raise InputError(f"expected shape {cost.shape}, got {ref.shape}", where="reference_cost_per_h")
    if np.any(ref == 0.0):
        raise InputError("a reference cost of 0 $/h leaves the gap undefined", where="reference_cost_per_h")
    return 100.0 * (cost - ref) / np.abs(ref)


def bound_violation(x, lower, upper, *, input_name: str = "x") -> np.ndarray:
    """Largest excess beyond [lower, upper] over the columns, shape (n_samples,), in the unit of
    ``x`` (shape (n_samples, n)); 0 when every value is within its bounds."""
    lo, hi = np.asarray(lower, float), np.asarray(upper, float)
    a = check_stacked(x, input_name, lo.shape[0])
    excess = np.maximum(lo - a, a - hi)
    return np.maximum(excess.max(axis=1, initial=0.0), 0.0)


def _complex_voltage(vm_pu, va_deg, n_bus: int) -> np.ndarray:
    vm = check_stacked(vm_pu, "vm_pu", n_bus)
    va = check_stacked(va_deg, "va_deg", n_bus)
    return vm * np.exp(1j * np.deg2rad(va))


def balance_residuals(net: Network, *, pd_mw, qd_mvar, pg_mw, qg_mvar, vm_pu, va_deg) -> np.ndarray:
    """Complex power mismatch at every bus, generation - load - injection into the network,
    shape (n_samples, n_bus) [MW + j MVAr]."""
    y = admittance(net)
    v = _complex_voltage(vm_pu, va_deg, net.n_bus)
    pg = check_stacked(pg_mw, "pg_mw", net.n_gen)
    qg = check_stacked(qg_mvar, "qg_mvar", net.n_gen)
    pd = check_stacked(pd_mw, "pd_mw", net.n_load)
    qd = check_stacked(qd_mvar, "qd_mvar", net.n_load)
    s_net = v * np.conj((y.ybus @ v.T).T) * net.base_mva
    s_gen = (y.cg @ (pg + 1j * qg).T).T
    s_load = (y.cl @ (pd + 1j * qd).T).T
    return s_gen - s_load - s_net


def active_balance_residual_mw(net: Network, **state) -> np.ndarray:
    """Largest active-power balance residual over the buses [MW], shape (n_samples,)."""
    return np.abs(balance_residuals(net, **state).real).max(axis=1)


def reactive_balance_residual_mvar(net: Network, **state) -> np.ndarray:
    """Largest reactive-power balance residual over the buses [MVAr], shape (n_samples,)."""
    return np.abs(balance_residuals(net, **state).imag).max(axis=1)


def branch_flows_mva(net: Network, *, vm_pu, va_deg) -> tuple[np.ndarray, np.ndarray]:
    """Apparent power at the from and to end of every branch, each shape (n_samples, n_branch) [MVA]."""
    y = admittance(net)
    v = _complex_voltage(vm_pu, va_deg, net.n_bus)
    i_f = (y.yf @ v.T).T
    i_t = (y.yt @ v.T).T
    sf = np.abs(v[:, net.f_idx] * np.conj(i_f)) * net.base_mva
    st = np.abs(v[:, net.t_idx] * np.conj(i_t)) * net.base_mva
    return sf, st


def _rated(rate_mva, in_service) -> tuple[np.ndarray, np.ndarray]:
    rate = np.asarray(rate_mva, float)
    limited = np.isfinite(rate) & (rate > 0) & np.asarray(in_service, bool)
    return limited, np.where(limited, rate, 1.0)


def thermal_overload_mva(sf_mva, st_mva, *, rate_mva, in_service) -> np.ndarray:
    """Largest flow above the rating at either branch end [MVA], shape (n_samples,); branches
    without a rating (NaN) or out of service are not limited."""
    limited, rate = _rated(rate_mva, in_service)
    sf = check_stacked(sf_mva, "sf_mva", rate.shape[0])
    st = check_stacked(st_mva, "st_mva", rate.shape[0])
    over = np.where(limited, np.maximum(sf, st) - rate, 0.0)
    return np.maximum(over.max(axis=1, initial=0.0), 0.0)


def thermal_overload_pct(sf_mva, st_mva, *, rate_mva, in_service) -> np.ndarray:
    """Largest flow above the rating at either branch end [% of the rating], shape (n_samples,)."""
    limited, rate = _rated(rate_mva, in_service)
    sf = check_stacked(sf_mva, "sf_mva", rate.shape[0])
    st = check_stacked(st_mva, "st_mva", rate.shape[0])
    over = np.where(limited, 100.0 * (np.maximum(sf, st) - rate) / rate, 0.0)
    return np.maximum(over.max(axis=1, initial=0.0), 0.0)


def angle_difference_violation_deg(va_deg, *, f_idx, t_idx, angmin_deg, angmax_deg, in_service) -> np.ndarray:
    """Largest excess of the branch angle difference va[from] - va[to] beyond its limits
    [degrees], shape (n_samples,); limits of -360 / 360 degrees mean no limit."""
    lo = np.asarray(angmin_deg, float)
    hi = np.asarray(angmax_deg, float)
    va = check_stacked(va_deg, "va_deg")
    on = np.asarray(in_service, bool)
    d = va[:, f_idx] - va[:, t_idx]
    excess = np.where(on, np.maximum(np.where(lo > -360, lo - d, -np.inf), np.where(hi < 360, d - hi, -np.inf)), 0)
    return np.maximum(excess.max(axis=1, initial=0.0), 0.0)


@dataclass(frozen=True)
class Metric:
    """A registered per-sample metric: its function, unit, and direction."""

    name: str
    func: Callable[..., np.ndarray]
    unit: str
    direction: str = "lower is better"


METRICS: dict[str, Metric] = {m.name: m for m in [
    Metric("generator_cost_per_h", generator_cost_per_h, "$/h"),
    Metric("optimality_gap_pct", optimality_gap_pct, "%", "closer to 0 is better"),
    Metric("bound_violation", bound_violation, "unit of the input"),
    Metric("active_balance_residual_mw", active_balance_residual_mw, "MW"),
    Metric("reactive_balance_residual_mvar", reactive_balance_residual_mvar, "MVAr"),
    Metric("thermal_overload_mva", thermal_overload_mva, "MVA"),
    Metric("thermal_overload_pct", thermal_overload_pct, "% of rating"),
    Metric("angle_difference_violation_deg", angle_difference_violation_deg, "degrees"),
]}
