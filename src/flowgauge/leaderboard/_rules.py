"""The ranking rule, read from ``rules.toml``: which networks and splits count, the ordered
ranking keys and their directions, and the settings of the tie test."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path

from .._io import sha256_hex
from ..errors import InputError

__all__ = ["METRICS", "DIRECTIONS", "MetricSpec", "RankKey", "Rules", "load_rules", "parse_rules"]


@dataclass(frozen=True)
class MetricSpec:
    """A rankable metric: where its per-split value sits in a scorecard's ``aggregates`` and
    which ``per_sample`` column it is the mean of (``skip_null``: samples with a null value,
    e.g. a diverged restoration power flow, are left out of the mean). With ``absolute`` the
    value is the mean of the column's absolute values, computed from ``per_sample``: a gap is
    better the closer it is to 0, and a negative gap (cheaper than the optimum) only comes with
    a violated limit, so gaps of opposite signs must not cancel."""

    aggregate: tuple[str, ...] | None
    per_sample: str
    skip_null: bool
    label: str
    ci95: str | None
    absolute: bool = False  # the mean of |per-sample value| (no aggregate field holds it)


# metric name -> where to find it; the names are those of the scorecard fields they read
METRICS = {
    "restoration_failure_rate": MetricSpec(
        ("restoration_failure_rate",), "restoration_failed", False,
        "restoration failure rate", "restoration_failure_rate"),
    "restored_gap_pct_mean": MetricSpec(
        ("restored_gap_pct", "mean"), "restored_gap_pct", True,
        "mean restored gap [%]", "restored_gap_pct_mean"),
    "restored_gap_pct_abs_mean": MetricSpec(
        None, "restored_gap_pct", True, "mean |restored gap| [%]", None, absolute=True),
    "raw_gap_pct_mean": MetricSpec(
        ("raw_gap_pct", "mean"), "raw_gap_pct", True, "mean raw gap [%]", None),
}

DIRECTIONS = ("lower", "higher")
_TOP_KEYS = {"format", "format_version", "scope", "keys", "ties", "scoring", "published"}


@dataclass(frozen=True)
class RankKey:
    metric: str
    direction: str  # "lower" or "higher" is better


@dataclass(frozen=True)
class Rules:
    """The parsed rule. ``networks`` None means every network that has submissions."""

    networks: tuple[str, ...] | None
    splits: tuple[str, ...]
    keys: tuple[RankKey, ...]
    level: float
    resamples: int
    seed: int
    profile: str | None
    published: tuple[str, ...]
    sha256: str


def load_rules(path: str | Path) -> Rules:
    """Read and check a rules file; every mistake names the file and the field."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError("no rules file here; a leaderboard folder needs rules.toml",
                         where=str(path)) from None
    return parse_rules(data, where=str(path))


def parse_rules(data: bytes, *, where: str = "rules.toml") -> Rules:
    try:
        doc = tomllib.loads(data.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid TOML: {exc}", where=where) from None
    unknown = sorted(set(doc) - _TOP_KEYS)
    if unknown:
        raise InputError(f"unknown field {unknown[0]!r}; expected one of {sorted(_TOP_KEYS)}",
                         where=f"{where}: {unknown[0]}")
    if doc.get("format") != "flowgauge-rules" or doc.get("format_version") != 1:
        raise InputError('expected format = "flowgauge-rules" and format_version = 1',
                         where=f"{where}: format")
    scope = _table(doc, "scope", where)
    ties = _table(doc, "ties", where)
    scoring = doc.get("scoring", {})
    return Rules(
        networks=_networks(scope.get("networks", "all"), where),
        splits=_str_list(scope.get("splits"), f"{where}: scope.splits", nonempty=True),
        keys=_keys(doc.get("keys"), where),
        level=_number(ties, "level", 0.95, where, lo=0.5, hi=0.999),
        resamples=int(_number(ties, "resamples", 2000, where, lo=100, hi=100000, integer=True)),
        seed=int(_number(ties, "seed", 0, where, lo=0, hi=2**63 - 1, integer=True)),
        profile=_optional_str(scoring, "profile", f"{where}: scoring.profile"),
        published=_str_list(doc.get("published", {}).get("splits", []),
                            f"{where}: published.splits", nonempty=False),
        sha256=sha256_hex(data),
    )


def _table(doc: dict, name: str, where: str) -> dict:
    value = doc.get(name)
    if not isinstance(value, dict):
        raise InputError(f"expected a [{name}] table", where=f"{where}: {name}")
    return value


def _networks(value, where: str) -> tuple[str, ...] | None:
    if value == "all":
        return None
    return _str_list(value, f"{where}: scope.networks", nonempty=True)


def _str_list(value, where: str, *, nonempty: bool) -> tuple[str, ...]:
    if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
        raise InputError("expected a list of names", where=where)
    if nonempty and not value:
        raise InputError("expected at least one name", where=where)
    if len(set(value)) != len(value):
        raise InputError("a name is listed twice", where=where)
    return tuple(value)


def _optional_str(table: dict, name: str, where: str) -> str | None:
    value = table.get(name)
    if value is not None and not (isinstance(value, str) and value):
        raise InputError("expected a profile name", where=where)
    return value


def _keys(value, where: str) -> tuple[RankKey, ...]:
    if not isinstance(value, list) or not value:
        raise InputError("expected at least one [[keys]] table", where=f"{where}: keys")
    keys = []
    for i, item in enumerate(value):
        at = f"{where}: keys[{i}]"
        metric = item.get("metric") if isinstance(item, dict) else None
        if metric not in METRICS:
            raise InputError(f"metric must be one of {sorted(METRICS)}; got {metric!r}", where=at)
        direction = item.get("direction")
        if direction not in DIRECTIONS:
            raise InputError(f"direction must be one of {list(DIRECTIONS)}; got {direction!r}",
                             where=at)
        keys.append(RankKey(metric, direction))
    if len({k.metric for k in keys}) != len(keys):
        raise InputError("a metric is listed twice", where=f"{where}: keys")
    return tuple(keys)


def _number(table: dict, name: str, default, where: str, *, lo, hi, integer: bool = False):
    value = table.get(name, default)
    ok = isinstance(value, int) if integer else isinstance(value, (int, float))
    if isinstance(value, bool) or not ok or not lo <= value <= hi:
        kind = "an integer" if integer else "a number"
        raise InputError(f"expected {kind} in [{lo}, {hi}]; got {value!r}",
                         where=f"{where}: ties.{name}")
    return value
