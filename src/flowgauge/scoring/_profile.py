"""Scoring profiles: the named, versioned set of tolerances the scorer judges with.

A profile's hash goes into every scorecard, so two scorecards are comparable only when
their profile hashes agree. Changing any value means a new version.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping

from .._io import canonical_json, sha256_hex
from ..errors import InputError

__all__ = ["ScoringProfile", "DEFAULT_PROFILE", "STRICT_PROFILE", "REACTIVE_LIMITS_PROFILE", "PROFILES",
           "get_profile"]


@dataclass(frozen=True)
class ScoringProfile:
    """Tolerances [units in the key names] and the fixed settings of the restoration power
    flow and of the bootstrap. ``hash`` is the SHA-256 of the canonical JSON of
    ``{"name", "version", "tolerances", "powerflow", "bootstrap"}`` plus ``"grading"`` when
    the profile has one.

    ``name`` selects the profile; ``recorded_name`` (default: ``name``) is the name written in
    scorecards. ``grading`` (None for ``strict``): the settings of severity, the tolerance curve
    and the solved share (docs/metrics.md); a profile with grading writes scorecard format 2.
    """

    name: str
    version: int
    tolerances: Mapping[str, float]
    powerflow: Mapping[str, Any]
    bootstrap: Mapping[str, Any]
    description: str = field(default="", compare=False)
    grading: Mapping[str, Any] | None = None
    recorded_name: str | None = field(default=None, compare=False)
    reasons: Mapping[str, str] = field(default_factory=dict, compare=False)

    def content(self) -> dict[str, Any]:
        out = {"name": self.recorded_name or self.name, "version": self.version, "tolerances": dict(self.tolerances),
               "powerflow": dict(self.powerflow), "bootstrap": dict(self.bootstrap)}
        if self.grading is not None:
            out["grading"] = {k: list(v) if isinstance(v, tuple) else v for k, v in self.grading.items()}
        return out

    @property
    def enforces_q_limits(self) -> bool:
        return bool(self.powerflow.get("enforce_q_limits", False))

    @property
    def hash(self) -> str:
        return sha256_hex(canonical_json(self.content()))

    def to_dict(self) -> dict[str, Any]:
        """The scorecard's ``profile`` object."""
        return {**self.content(), "hash": self.hash}


# Common practice for judging a dispatch against its limits: a tenth of a MW / MVAr for power
# balance and generator limits, a thousandth of a per unit for voltages, half a percent of the
# rating for thermal limits and a tenth of a degree for angle differences.
# This was the only profile before version 2 and its scorecards record it under the name it had
# then, "default", so that they stay the same bytes.
STRICT_PROFILE = ScoringProfile(
    name="strict",
    recorded_name="default",
    version=1,
    tolerances=MappingProxyType({
        "active_power_mw": 0.1,
        "reactive_power_mvar": 0.1,
        "balance_mw": 0.1,
        "balance_mvar": 0.1,
        "voltage_pu": 0.001,
        "thermal_pct_of_rating": 0.5,
        "angle_deg": 0.1,
    }),
    # The restoration power flow: Newton-Raphson from the setpoint voltages with angles from a
    # DC power flow of the predicted injections; no fallback, no clipping.
    powerflow=MappingProxyType({"start": "dc", "tolerance_pu": 1e-8, "max_iterations": 20}),
    # Percentile bootstrap of the per-sample values; the seed makes it reproducible.
    bootstrap=MappingProxyType({"resamples": 2000, "seed": 20261201, "level": 0.95}),
    description="Restoration holds every PV bus at its setpoint; any generator beyond a reactive limit "
                "by 0.1 MVAr fails the sample.",
)

# Profile 2: restoration as the trade runs a power flow. Tolerances per limit family; the
# reason for each is in REACTIVE_LIMITS_REASONS and docs/metrics.md.
REACTIVE_LIMITS_REASONS = MappingProxyType({
    "active_power_mw": "common practice: a tenth of a MW, the resolution of dispatch instructions",
    "active_power_pct_of_rating": "common practice: a unit's output is metered and controlled to about 1 % of "
                                  "its rating (accuracy classes of control metering)",
    "reactive_power_mvar": "common practice: a tenth of a MVAr",
    "reactive_power_pct_of_rating": "common practice: as for active power, 1 % of the unit's rating",
    "balance_mw": "common practice: a tenth of a MW",
    "balance_mvar": "common practice: a tenth of a MVAr",
    "voltage_pu": "common practice: a thousandth of a per unit, the resolution of voltage schedules",
    "thermal_pct_of_rating": "common practice: ratings are stated to about 1 % of the rating",
    "angle_deg": "common practice: a tenth of a degree",
})

REACTIVE_LIMITS_PROFILE = ScoringProfile(
    name="reactive-limits",
    version=2,
    tolerances=MappingProxyType({
        "active_power_mw": 0.1,
        "active_power_pct_of_rating": 1.0,
        "reactive_power_mvar": 0.1,
        "reactive_power_pct_of_rating": 1.0,
        "balance_mw": 0.1,
        "balance_mvar": 0.1,
        "voltage_pu": 0.001,
        "thermal_pct_of_rating": 1.0,
        "angle_deg": 0.1,
    }),
    # As strict, plus reactive-limit enforcement: PV buses switch to PQ at a violated reactive
    # limit and back (docs/powerflow.md), at most 10 rounds; samples solved in chunks of 256.
    powerflow=MappingProxyType({"start": "dc", "tolerance_pu": 1e-8, "max_iterations": 20,
                                "enforce_q_limits": True, "max_switch_rounds": 10, "chunk_samples": 256}),
    bootstrap=MappingProxyType({"resamples": 2000, "seed": 20261201, "level": 0.95}),
    grading=MappingProxyType({
        # the failure rate is also reported with every tolerance multiplied by these
        "tolerance_multiples": (0.1, 0.3, 1.0, 3.0, 10.0),
        # solved: restoration passes every limit and |restored gap| <= threshold [%]
        "solved_thresholds_pct": (0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0),
        "solved_threshold_pct": 1.0,
    }),
    reasons=REACTIVE_LIMITS_REASONS,
    description="Restoration enforces reactive limits (PV buses switch to PQ at a limit); tolerances per "
                "limit family, relative to a generator's or a branch's rating where stated so.",
)

DEFAULT_PROFILE = REACTIVE_LIMITS_PROFILE

PROFILES: Mapping[str, ScoringProfile] = MappingProxyType({"reactive-limits": REACTIVE_LIMITS_PROFILE,
                                                           "strict": STRICT_PROFILE})


def get_profile(profile: str | ScoringProfile | None) -> ScoringProfile:
    """A profile by name (None: the default, ``reactive-limits``) or the given profile object."""
    if profile is None:
        return DEFAULT_PROFILE
    if isinstance(profile, ScoringProfile):
        return profile
    if isinstance(profile, str) and profile in PROFILES:
        return PROFILES[profile]
    if profile == "default":
        raise InputError("the profile called 'default' before version 2 is now called 'strict'; the default is "
                         f"'reactive-limits' (known profiles: {', '.join(PROFILES)})", where="profile")
    raise InputError(f"unknown scoring profile {profile!r}; known profiles: {', '.join(PROFILES)}",
                     where="profile")
