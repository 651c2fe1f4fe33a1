"""Solver settings and the one table of result statuses."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

__all__ = ["OPFSettings", "STATUSES", "STATUS_MESSAGES"]

# The one table of statuses; every result's ``status`` is a key of it.
STATUS_MESSAGES = {
    "converged": "converged: balance residuals, limit violations, dual infeasibility, "
                 "complementarity and cost change are all under the tolerances",
    "infeasible": "no feasible point found: the balance residuals or limit violations stopped "
                  "decreasing while the multipliers grew (the loading is likely beyond what the "
                  "network can carry)",
    "iteration_limit": "stopped at the iteration limit before meeting the tolerances",
    "numerical_failure": "stopped on a numerical failure (singular Newton system, vanishing step "
                         "or non-finite values)",
}
STATUSES = tuple(STATUS_MESSAGES)


@dataclass(frozen=True)
class OPFSettings:
    """Tolerances and limits of the interior-point solver (recorded in split manifests).

    ``feasibility_tol``: largest accepted power-balance residual [p.u. on base_mva] and largest
    accepted limit violation (voltage [p.u.], generator output [p.u.], branch flow as a fraction
    of its rating, angle difference [rad]) at a "converged" point.
    ``gradient_tol``: largest accepted gradient of the Lagrangian, divided by
    1 + the largest multiplier (scale-free dual infeasibility).
    ``complementarity_tol``: largest accepted slack x multiplier product of any inequality,
    divided by 1 + the largest variable magnitude (scaled objective).
    ``cost_tol``: largest accepted relative change of the objective in the last iteration.
    ``max_iter``: iteration limit. ``step_to_boundary``: fraction of the step to the boundary
    of the positive orthant taken at most (keeps slacks and multipliers positive).
    ``centering``: factor by which the barrier parameter follows the mean complementarity.
    ``min_step``: a step length below this is a numerical failure.
    ``binding_tol``: a limit is reported as binding when the solution lies within this distance
    of it (voltage [p.u.], generator output [p.u. on base_mva], branch flow as a fraction of
    its rating, angle difference [rad]).
    ``predictor_corrector``: use Mehrotra's predictor-corrector steps (True) or a fixed
    centering factor (False); ``corrector_min_step``: when the corrected step is shorter
    than this fraction, a plain step with the fixed centering factor is taken instead.
    ``barrier_floor``: the barrier target never falls below this fraction of the mean
    complementarity that the complementarity test accepts (keeps the Newton matrix well
    conditioned near degenerate solutions, e.g. close to maximum loadability).
    ``cost_scale``: factor applied to the objective inside the solver for better conditioning
    (results are reported unscaled; the complementarity and dual-infeasibility tests use the
    scaled objective).
    ``loadability_dispatch_weight``: weight of ``sum(pg^2 + qg^2)`` [per p.u.^2] added to
    ``-lam`` in the maximum-loadability objective, so that one dispatch is chosen among the
    many that reach the same scale factor (lowers ``lam`` by about this weight's size).
    ``loadability_backoff``: relative back-off of the reported maximum scale factor from the
    optimum (see :func:`flowgauge.opf.max_loadability`).
    ``stall_iterations``: if the feasibility measure has not halved in this many iterations
    while the multipliers grow past ``multiplier_limit``, the run stops as "infeasible".
    """

    feasibility_tol: float = 1e-6
    gradient_tol: float = 1e-6
    complementarity_tol: float = 1e-10
    cost_tol: float = 1e-6
    max_iter: int = 150
    step_to_boundary: float = 0.99995
    centering: float = 0.1
    min_step: float = 1e-10
    binding_tol: float = 1e-4
    predictor_corrector: bool = True
    corrector_min_step: float = 0.5
    barrier_floor: float = 0.5
    cost_scale: float = 1e-4
    loadability_dispatch_weight: float = 1e-6
    loadability_backoff: float = 1e-6
    stall_iterations: int = 25
    multiplier_limit: float = 1e8

    def to_dict(self) -> dict[str, Any]:
        """The settings as a plain dict (for manifests)."""
        return asdict(self)
