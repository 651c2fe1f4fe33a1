"""Result objects of the optimal power flow solvers, binding-limit labels and input checks."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from ..network._model import Network

__all__ = ["OPFResult", "LoadabilityResult", "LIMIT_NAMES", "binding_signature", "check_loads",
           "check_costs"]

# Every limit that carries a multiplier, with the element type it belongs to.
LIMIT_NAMES = {
    "vmin": "bus", "vmax": "bus", "pmin": "gen", "pmax": "gen", "qmin": "gen", "qmax": "gen",
    "rate_from": "branch", "rate_to": "branch", "angmin": "branch", "angmax": "branch",
}


@dataclass(frozen=True, eq=False)
class OPFResult:
    """Outcome of one optimal power flow solve.

    ``status``: a key of :data:`flowgauge.opf.STATUSES`; ``message``: its text.
    ``objective``: generation cost [$/h]. ``pg_mw``, ``qg_mvar``: shape (n_gen,) [MW], [MVAr].
    ``vm_pu``, ``va_deg``: shape (n_bus,) [p.u.], [deg]. ``lmp_per_mwh``: multiplier of each
    bus's active-power balance, shape (n_bus,) [$/MWh] (locational marginal price);
    ``lmq_per_mvarh``: the same for reactive power [$/MVArh]. ``multipliers``: one array per
    limit name of :data:`LIMIT_NAMES` (non-negative): ``vmin``/``vmax`` (n_bus,) [$/h per p.u.],
    ``pmin``/``pmax`` (n_gen,) [$/MWh], ``qmin``/``qmax`` (n_gen,) [$/MVArh],
    ``rate_from``/``rate_to`` (n_branch,) [$/MVAh] (on the apparent-power limit),
    ``angmin``/``angmax`` (n_branch,) [$/h per degree].
    ``iterations``; ``seconds`` (wall-clock solve time; not part of any hashed output).
    ``max_p_mismatch_mw``, ``max_q_mismatch_mvar``: largest bus balance residual.
    ``violations``: largest violation per limit kind in the limit's own unit (``vm_pu``,
    ``pg_mw``, ``qg_mvar``, ``rate_mva``, ``angle_deg``); ``max_limit_violation`` is the
    largest of them (0 when every limit holds).
    ``complementarity``: largest slack x multiplier / (1 + largest variable) (scaled objective);
    ``dual_infeasibility``: largest Lagrangian gradient entry / (1 + largest multiplier).
    ``binding``: sorted labels ``"<bus|gen|branch>:<id>:<limit>"`` of the limits within
    ``OPFSettings.binding_tol`` of the solution; ``signature``: first 16 hex digits of the
    SHA-256 of the labels joined by newlines (a compact, hashable regime label).
    ``pd_mw``, ``qd_mvar``: the loads solved for, shape (n_load,).
    """

    status: str
    message: str
    objective: float
    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray
    lmp_per_mwh: np.ndarray
    lmq_per_mvarh: np.ndarray
    multipliers: dict[str, np.ndarray]
    iterations: int
    seconds: float
    max_p_mismatch_mw: float
    max_q_mismatch_mvar: float
    max_limit_violation: float
    complementarity: float
    dual_infeasibility: float
    binding: tuple[str, ...]
    signature: str
    violations: dict[str, float] = field(default_factory=dict)
    pd_mw: np.ndarray | None = None
    qd_mvar: np.ndarray | None = None

    @property
    def converged(self) -> bool:
        return self.status == "converged"


@dataclass(frozen=True, eq=False)
class LoadabilityResult:
    """Outcome of a maximum-loadability solve.

    ``lam_limit``: the largest scale factor of the load direction at which the AC-OPF
    constraints can be met (loads = base + lam x direction); ``lam``: that value backed off by
    ``OPFSettings.loadability_backoff`` (relative) so that the AC-OPF at ``lam`` has a
    feasible interior; ``status``, ``message`` as for :class:`OPFResult`; ``pd_mw``,
    ``qd_mvar`` (n_load,): the loads at ``lam``; the operating point at ``lam_limit``:
    ``pg_mw``, ``qg_mvar`` (n_gen,), ``vm_pu``, ``va_deg`` (n_bus,); ``binding``,
    ``signature``, ``iterations``, ``seconds``, residuals and violations as for
    :class:`OPFResult`.
    """

    status: str
    message: str
    lam: float
    pd_mw: np.ndarray
    qd_mvar: np.ndarray
    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray
    binding: tuple[str, ...]
    signature: str
    iterations: int
    seconds: float
    max_p_mismatch_mw: float
    max_q_mismatch_mvar: float
    max_limit_violation: float
    violations: dict[str, float] = field(default_factory=dict)
    lam_limit: float = float("nan")

    @property
    def converged(self) -> bool:
        return self.status == "converged"


def binding_signature(binding: tuple[str, ...]) -> str:
    """First 16 hex digits of the SHA-256 of the binding labels joined by newlines."""
    return hashlib.sha256("\n".join(binding).encode("utf-8")).hexdigest()[:16]


def check_loads(net: Network, arr, name: str, default: np.ndarray) -> np.ndarray:
    """A load array of shape (n_load,) with finite values, or the network's own when None."""
    if arr is None:
        return np.asarray(default, float).copy()
    try:
        out = np.asarray(arr, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"expected numbers, shape ({net.n_load},), got {type(arr).__name__}",
                         where=name) from None
    if out.shape != (net.n_load,):
        raise InputError(f"expected shape ({net.n_load},) (one value per load of network "
                         f"'{net.name}'), got shape {out.shape}", where=name)
    bad = np.flatnonzero(~np.isfinite(out))
    if bad.size:
        raise InputError(f"expected finite numbers, got {out[bad[0]]} for load id "
                         f"{int(net.load_id[bad[0]])}", where=name)
    return out


def check_costs(net: Network) -> None:
    if not net.has_costs:
        raise InputError("the network has no generator costs (cost_c1 is missing); the optimal "
                         "power flow needs a cost for every generator", where=f"network '{net.name}'")
