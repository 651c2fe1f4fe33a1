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

__all__ = ["ScoringProfile", "DEFAULT_PROFILE", "PROFILES", "get_profile"]


@dataclass(frozen=True)
class ScoringProfile:
    """Tolerances [units in the key names] and the fixed settings of the restoration power
    flow and of the bootstrap. ``hash`` is the SHA-256 of the canonical JSON of
    ``{"name", "version", "tolerances", "powerflow", "bootstrap"}``."""

    name: str
    version: int
    tolerances: Mapping[str, float]
    powerflow: Mapping[str, Any]
    bootstrap: Mapping[str, Any]
    description: str = field(default="", compare=False)

    def content(self) -> dict[str, Any]:
        return {"name": self.name, "version": self.version, "tolerances": dict(self.tolerances),
                "powerflow": dict(self.powerflow), "bootstrap": dict(self.bootstrap)}

    @property
    def hash(self) -> str:
        return sha256_hex(canonical_json(self.content()))

    def to_dict(self) -> dict[str, Any]:
        """The scorecard's ``profile`` object."""
        return {**self.content(), "hash": self.hash}


# Common practice for judging a dispatch against its limits: a tenth of a MW / MVAr for power
# balance and generator limits, a thousandth of a per unit for voltages, half a percent of the
# rating for thermal limits and a tenth of a degree for angle differences.
DEFAULT_PROFILE = ScoringProfile(
    name="default",
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
    description="Common-practice tolerances; Newton-Raphson 1e-8 p.u., 20 iterations.",
)

PROFILES: Mapping[str, ScoringProfile] = MappingProxyType({"default": DEFAULT_PROFILE})


def get_profile(profile: str | ScoringProfile | None) -> ScoringProfile:
    """A profile by name (None: ``default``) or the given profile object."""
    if profile is None:
        return DEFAULT_PROFILE
    if isinstance(profile, ScoringProfile):
        return profile
    if isinstance(profile, str) and profile in PROFILES:
        return PROFILES[profile]
    raise InputError(f"The 'profile' parameter of score must be one of {sorted(PROFILES)}. Got {profile!r} instead.",
                     where="profile")
