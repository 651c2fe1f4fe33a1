"""The scorecard: canonical JSON with its own content hash, and a per-sample table."""

from __future__ import annotations

import io
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._io import atomic_write_bytes, canonical_json, sha256_hex
from ..errors import InputError, IntegrityError

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "GRADED_FORMAT_VERSION", "STATE_FORMAT_VERSION", "FORMAT_VERSIONS",
           "PER_SAMPLE_JSON_FIELDS", "GRADED_PER_SAMPLE_JSON_FIELDS", "STATE_PER_SAMPLE_JSON_FIELDS", "Scorecard",
           "read_scorecard", "scorecard_hash", "per_sample_json_fields"]

FORMAT_NAME = "flowgauge-scorecard"
FORMAT_VERSION = 1
# Written by profiles with grading: version 1 plus severity, the tolerance curve and the solved
# share (docs/metrics.md).
GRADED_FORMAT_VERSION = 2
# Written for splits with per-sample network states, whatever the profile: version 1 or 2 (by
# the profile: with grading, the fields of 2) plus the breakdown by outage kind and each
# sample's outage kind (docs/metrics.md, "Splits with network states").
STATE_FORMAT_VERSION = 3
FORMAT_VERSIONS = (FORMAT_VERSION, GRADED_FORMAT_VERSION, STATE_FORMAT_VERSION)
# Per-sample columns carried in the JSON scorecard (the ranking's paired bootstrap uses them);
# the full per-sample table goes to Parquet with ``--per-sample``.
PER_SAMPLE_JSON_FIELDS = ("sample_id", "restoration_failed", "restored_gap_pct", "raw_gap_pct")
GRADED_PER_SAMPLE_JSON_FIELDS = PER_SAMPLE_JSON_FIELDS + ("solved", "severity")
STATE_PER_SAMPLE_JSON_FIELDS = ("outage",)


def per_sample_json_fields(header: dict[str, Any]) -> tuple[str, ...]:
    """The per-sample columns a scorecard with this header carries in its JSON."""
    version = header.get("format_version")
    if version == FORMAT_VERSION:
        return PER_SAMPLE_JSON_FIELDS
    if version == GRADED_FORMAT_VERSION:
        return GRADED_PER_SAMPLE_JSON_FIELDS
    profile = header.get("profile")
    graded = isinstance(profile, dict) and "grading" in profile
    return (GRADED_PER_SAMPLE_JSON_FIELDS if graded else PER_SAMPLE_JSON_FIELDS) + STATE_PER_SAMPLE_JSON_FIELDS


def scorecard_hash(doc: dict[str, Any]) -> str:
    """SHA-256 of the canonical JSON of ``doc`` without its ``scorecard_hash`` field."""
    return sha256_hex(canonical_json({k: v for k, v in doc.items() if k != "scorecard_hash"}))


def _json_column(values: pd.Series) -> list:
    a = values.to_numpy()
    if a.dtype.kind == "b":
        return a.astype(int).tolist()
    if a.dtype.kind == "f":
        return [None if not np.isfinite(x) else float(x) for x in a.tolist()]
    return a.tolist()


@dataclass(frozen=True, eq=False)
class Scorecard:
    """A scored predictions file.

    ``header``: the scorecard's fixed fields (format, versions, split, predictions hash,
    profile, model); ``aggregates``: the split-level numbers (see docs/metrics.md);
    ``per_sample``: one row per sample, sorted by ``sample_id``.
    """

    header: dict[str, Any]
    aggregates: dict[str, Any]
    per_sample: pd.DataFrame = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """The scorecard document, with its ``scorecard_hash``."""
        fields = per_sample_json_fields(self.header)
        doc = {**self.header, "aggregates": self.aggregates,
               "per_sample": {k: _json_column(self.per_sample[k]) for k in fields}}
        # Round-trip through canonical JSON so the hash covers exactly what is written.
        doc = json.loads(canonical_json(doc))
        doc["scorecard_hash"] = scorecard_hash(doc)
        return doc

    def to_bytes(self) -> bytes:
        return canonical_json(self.to_dict())

    @property
    def scorecard_hash(self) -> str:
        return self.to_dict()["scorecard_hash"]

    def write(self, path: str | Path) -> Path:
        """Write the canonical JSON scorecard atomically; returns the path."""
        return _write(Path(path), self.to_bytes())

    def write_per_sample(self, path: str | Path) -> Path:
        """Write the per-sample table as Parquet, atomically."""
        buf = io.BytesIO()
        self.per_sample.to_parquet(buf, index=False)
        return _write(Path(path), buf.getvalue())


def _write(path: Path, data: bytes) -> Path:
    try:
        atomic_write_bytes(path, data)
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror or exc}); choose a writable file path",
                         where=str(path)) from exc
    return path


def read_scorecard(path: str | Path) -> dict[str, Any]:
    """Read a scorecard and verify its ``scorecard_hash``.

    Raises InputError when the file is missing, not JSON or not a scorecard, and
    IntegrityError when the content does not match the recorded hash.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the scorecard ({exc.strerror or exc})", where=str(path)) from exc
    try:
        doc = json.loads(raw)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not JSON ({exc}); expected a flowgauge scorecard", where=str(path)) from exc
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
        raise InputError(f"not a scorecard: expected \"format\": \"{FORMAT_NAME}\"", where=f"{path}#/format")
    if doc.get("format_version") not in FORMAT_VERSIONS or isinstance(doc.get("format_version"), bool):
        raise InputError(f"unknown scorecard format_version {doc.get('format_version')!r}; this flowgauge "
                         f"reads versions {', '.join(map(str, FORMAT_VERSIONS))}", where=f"{path}#/format_version")
    recorded = doc.get("scorecard_hash")
    if not isinstance(recorded, str):
        raise InputError("missing the scorecard_hash field", where=f"{path}#/scorecard_hash")
    actual = scorecard_hash(doc)
    if actual != recorded:
        raise IntegrityError(f"content does not match its scorecard_hash (recorded {recorded[:12]}..., "
                             f"content {actual[:12]}...); the file was changed after scoring", where=str(path))
    return doc
