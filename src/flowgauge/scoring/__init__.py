"""Scoring: per-sample metrics, the restoration power flow, aggregation with bootstrap
intervals, and the canonical scorecard. Definitions: docs/metrics.md."""

from ._metrics import (METRICS, Metric, active_balance_residual_mw, angle_difference_violation_deg,
                       balance_residuals, bound_violation, branch_flows_mva, check_stacked,
                       generator_cost_per_h, optimality_gap_pct, reactive_balance_residual_mvar,
                       thermal_overload_mva, thermal_overload_pct)
from ._profile import DEFAULT_PROFILE, PROFILES, REACTIVE_LIMITS_PROFILE, STRICT_PROFILE, ScoringProfile, get_profile
from ._restoration import CAUSES, GRADED_CAUSES, Restoration, causes_of, restore
from ._score import FAMILY_TOLERANCE, RAW_FAMILIES, RESTORED_FAMILIES, score, score_arrays
from ._scorecard import (FORMAT_NAME, FORMAT_VERSION, FORMAT_VERSIONS, GRADED_FORMAT_VERSION, STATE_FORMAT_VERSION,
                         Scorecard, read_scorecard, scorecard_hash)
from ._state import OUTAGE_KINDS

__all__ = [
    "score", "score_arrays", "Scorecard", "read_scorecard", "scorecard_hash", "FORMAT_NAME", "FORMAT_VERSION",
    "GRADED_FORMAT_VERSION", "STATE_FORMAT_VERSION", "FORMAT_VERSIONS", "OUTAGE_KINDS",
    "ScoringProfile", "DEFAULT_PROFILE", "STRICT_PROFILE", "REACTIVE_LIMITS_PROFILE", "PROFILES", "get_profile",
    "Restoration", "restore", "CAUSES", "GRADED_CAUSES", "causes_of", "FAMILY_TOLERANCE", "RAW_FAMILIES", "RESTORED_FAMILIES",
    "METRICS", "Metric", "check_stacked", "generator_cost_per_h", "optimality_gap_pct", "bound_violation",
    "balance_residuals", "active_balance_residual_mw", "reactive_balance_residual_mvar", "branch_flows_mva",
    "thermal_overload_mva", "thermal_overload_pct", "angle_difference_violation_deg",
]
