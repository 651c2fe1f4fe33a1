"""The one table of power-flow statuses."""

from __future__ import annotations

__all__ = ["STATUSES", "CONVERGED", "MAX_ITERATIONS", "SINGULAR_JACOBIAN", "DIVERGED", "SWITCHING_UNSETTLED"]

CONVERGED = "converged"
MAX_ITERATIONS = "max_iterations"
SINGULAR_JACOBIAN = "singular_jacobian"
DIVERGED = "diverged"
SWITCHING_UNSETTLED = "switching_unsettled"

# status -> message; the order gives the integer codes used inside the solver
STATUSES: dict[str, str] = {
    CONVERGED: "the largest power mismatch fell below the tolerance",
    MAX_ITERATIONS: "the iteration limit was reached before the largest power mismatch fell below the tolerance",
    SINGULAR_JACOBIAN: "the Jacobian became singular (no unique Newton step)",
    DIVERGED: "the voltages or mismatches became non-finite",
    SWITCHING_UNSETTLED: "buses still switched between PV and PQ after the last round of reactive-limit enforcement",
}
STATUS_NAMES = list(STATUSES)
