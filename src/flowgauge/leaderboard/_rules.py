"""The ranking rule, read from ``rules.toml``: which networks and splits count, the ordered
ranking keys and their directions, and the settings of the tie test."""

from __future__ import annotations

import functools
import json
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .._io import sha256_hex
from ..errors import InputError
from ._files import read_small_file
from ._text import clean

__all__ = ["METRICS", "DIRECTIONS", "MetricSpec", "RankKey", "Rules", "load_rules", "parse_rules",
           "rules_schema", "SCHEMA_PATH"]


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
    # scorecard format 2 (profiles with grading)
    "solved_share": MetricSpec(
        ("solved_share",), "solved", False, "solved share", None),
    "severity_mean": MetricSpec(
        ("severity", "mean"), "severity", False, "mean severity", None),
}

DIRECTIONS = ("lower", "higher")
SCHEMA_PATH = Path(__file__).resolve().parent.parent / "schema" / "rules.schema.json"
MAX_RULES_BYTES = 1 << 20


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
    split_keys: tuple[tuple[str, tuple[RankKey, ...]], ...] = ()
    allow_extra_data: bool = False

    def keys_for(self, scope: str) -> tuple[RankKey, ...]:
        """The keys of the table of ``scope`` ("all" or a split name)."""
        return dict(self.split_keys).get(scope, self.keys)


def load_rules(path: str | Path) -> Rules:
    """Read and check a rules file; every mistake names the file and the field."""
    path = Path(path)
    data = read_small_file(path, where=str(path), expected="a rules file in TOML",
                           missing="no rules file here; a leaderboard folder needs rules.toml",
                           max_bytes=MAX_RULES_BYTES)
    return parse_rules(data, where=str(path))


def parse_rules(data: bytes, *, where: str = "rules.toml") -> Rules:
    """The rule in ``data`` (the bytes of a rules file), checked against
    ``schema/rules.schema.json``: the first mistake raises :class:`InputError` naming the key
    and what was expected."""
    try:
        doc = tomllib.loads(data.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid TOML: {clean(exc, 300)}", where=where) from None
    _check_schema(doc, where)
    scope, ties, scoring = doc["scope"], doc["ties"], doc.get("scoring", {})
    networks = scope.get("networks", "all")
    return Rules(
        networks=None if networks == "all" else tuple(networks),
        splits=tuple(scope["splits"]),
        keys=_keys(doc["keys"], where),
        level=float(ties.get("level", 0.95)),
        resamples=int(ties.get("resamples", 2000)),
        seed=int(ties.get("seed", 0)),
        profile=scoring.get("profile"),
        published=tuple(doc.get("published", {}).get("splits", [])),
        sha256=sha256_hex(data),
        split_keys=tuple((name, _keys(value, where)) for name, value in sorted(doc.get("split_keys", {}).items())),
        allow_extra_data=bool(doc.get("entries", {}).get("allow_extra_data", False)),
    )


@functools.lru_cache(maxsize=1)
def rules_schema() -> dict:
    """The JSON Schema (2020-12) of rules.toml, as TOML parses it."""
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


def _check_schema(doc: dict, where: str) -> None:
    import jsonschema

    validator = jsonschema.Draft202012Validator(rules_schema())
    errors = sorted(validator.iter_errors(doc),
                    key=lambda e: ([str(p) for p in e.absolute_path], e.validator))
    if errors:
        key, message = _explain(errors[0])
        raise InputError(message, where=f"{where}: {key}" if key else where)


def _key_name(path) -> str:
    out = ""
    for part in path:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out


def _shown(value) -> str:
    """A TOML value as the rules file would write it (capped: it may be long)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, str):
        return repr(clean(value, 80))
    return clean(repr(value), 80)


def _explain(error) -> tuple[str, str]:
    """(the key, what was expected) for the first schema violation."""
    key = _key_name(error.absolute_path)
    schema, value, kind = error.schema, error.instance, error.validator
    what = schema.get("description", "another value")
    if kind == "additionalProperties":
        allowed = sorted(schema.get("properties", {}))
        extra = sorted(set(value) - set(allowed))[0]
        name = f"{key}.{extra}" if key else extra
        return name, f"unknown key {clean(extra, 80)!r}; expected one of {', '.join(allowed)}"
    if kind == "required":
        missing = next(k for k in schema["required"] if k not in value)
        return (f"{key}.{missing}" if key else missing), f"missing key {missing!r}"
    if kind == "enum":
        return key, (f"expected {what}, one of {', '.join(map(str, schema['enum']))}; "
                     f"got {_shown(value)}")
    if kind == "minItems":
        return key, f"expected {what}, at least {schema['minItems']}; got an empty list"
    if kind == "uniqueItems":
        return key, "a name is listed twice"
    return key, f"expected {what}; got {_shown(value)}"


def _keys(value: list, where: str) -> tuple[RankKey, ...]:
    """The ranking keys (their fields already checked by the schema), each metric once."""
    keys = tuple(RankKey(item["metric"], item["direction"]) for item in value)
    if len({k.metric for k in keys}) != len(keys):
        raise InputError("a metric is listed twice", where=f"{where}: keys")
    return keys
