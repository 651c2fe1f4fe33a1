"""Loading a predictions file (JSON or Parquet) into arrays."""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._io import canonical_json, hash_arrays, parse_json, read_input_bytes, sha256_hex
from ..errors import InputError
from ._format import (
    ARRAY_FIELDS, DEFAULT_MAX_BYTES, FORMAT_NAME, FORMAT_VERSION, HEADER_KEYS, Problems,
    format_problems, header_validator, schema_problems,
)
from ._samples import check_samples, json_type

__all__ = ["Predictions", "load_predictions", "read_predictions", "make_predictions", "check_header"]

PARQUET_MAGIC = b"PAR1"


@dataclass(frozen=True, eq=False)
class Predictions:
    """A proxy's predictions for one split, as arrays sorted by sample id.

    ``sample_id`` shape (S,) int64; ``pg_mw`` (S, n_gen) [MW]; ``vm_pu`` (S, n_bus) [p.u.];
    ``va_deg`` (S, n_bus) [degrees] and ``qg_mvar`` (S, n_gen) [MVAr] or None when the file
    does not give them; ``inference_ms`` (S,) [ms], NaN where not reported. Columns follow the
    element order of the split manifest. ``row`` (S,) is each sample's position in the file.
    ``header`` holds format, format_version, split and model. ``content_hash`` is SHA-256 over
    the canonical header and the arrays, so the same predictions hash the same in JSON and
    Parquet, in any sample order. ``format`` is "json", "parquet" or None (built in memory).
    """

    path: Path | None
    header: dict
    format: str | None
    sample_id: np.ndarray
    pg_mw: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray | None
    qg_mvar: np.ndarray | None
    inference_ms: np.ndarray
    row: np.ndarray
    content_hash: str

    @property
    def n_samples(self) -> int:
        return int(self.sample_id.shape[0])

    @property
    def split_hash(self) -> str:
        return self.header["split"]["split_hash"]

    @property
    def fields(self) -> tuple[str, ...]:
        """The array fields given, in file-format order."""
        return tuple(f for f in ARRAY_FIELDS if getattr(self, f) is not None)

    def where(self, field: str, k: int, item: int | None = None) -> str:
        """Where ``field`` of the ``k``-th sample (sorted order) sits in the file: a JSON
        pointer, a Parquet column and row, or ``field[row, item]`` for arrays in memory."""
        r = int(self.row[k])
        if self.format == "parquet":
            return f"column {field}, row {r}" + ("" if item is None else f", item {item}")
        if self.format is None:
            return f"{field}[{r}" + ("]" if item is None else f", {item}]")
        return f"/samples/{r}/{field}" + ("" if item is None else f"/{item}")


def make_predictions(header: dict, sample_id: np.ndarray, arrays: dict, inference_ms: np.ndarray,
                     fmt: str | None, path: Path | None) -> Predictions:
    """Sort by sample id (stable) and compute the content hash."""
    order = np.argsort(sample_id, kind="stable")
    cols = {"sample_id": np.asarray(sample_id, dtype=np.int64)[order],
            "inference_ms": np.asarray(inference_ms, dtype=np.float64)[order]}
    for f in ARRAY_FIELDS:
        if arrays.get(f) is not None:
            cols[f] = np.ascontiguousarray(arrays[f], dtype=np.float64)[order]
    header = {k: header[k] for k in HEADER_KEYS}
    digest = sha256_hex(canonical_json({"header": header, "arrays": hash_arrays(cols)}))
    return Predictions(
        path=path, header=header, format=fmt, sample_id=cols["sample_id"],
        pg_mw=cols["pg_mw"], vm_pu=cols["vm_pu"], va_deg=cols.get("va_deg"),
        qg_mvar=cols.get("qg_mvar"), inference_ms=cols["inference_ms"], row=order.astype(np.int64),
        content_hash=digest)


def load_predictions(path: str | os.PathLike, *, max_bytes: int = DEFAULT_MAX_BYTES) -> Predictions:
    """Read a predictions file (JSON or Parquet, told apart by content) into arrays.

    Checks the form: the header against the JSON Schema, the samples' fields, types and
    that every sample has the same array lengths. Consistency with the split (ids, lengths,
    finite and plausible values) is :func:`validate_predictions`' job.
    Raises :class:`InputError` listing up to 20 problems, then their count.
    """
    predictions, problems = read_predictions(path, max_bytes=max_bytes)
    if problems:
        raise InputError(format_problems(problems.kept, problems.count), where=str(path))
    return predictions


def read_predictions(path: str | os.PathLike, *, max_bytes: int = DEFAULT_MAX_BYTES):
    """``(Predictions or None, Problems)``; file-level errors raise InputError at once."""
    path = Path(path)
    data = read_input_bytes(path, expected="a predictions file (.json or .parquet)", max_bytes=max_bytes)
    problems = Problems()
    if data[:4] == PARQUET_MAGIC:
        from ._parquet import read_parquet
        parsed, fmt = read_parquet(data, path, problems, max_bytes), "parquet"
    else:
        parsed, fmt = _read_json(data, path, problems), "json"
    if parsed is None or problems:
        return None, problems
    header, sample_id, arrays, inference_ms = parsed
    return make_predictions(header, sample_id, arrays, inference_ms, fmt, path), problems


def _read_json(data: bytes, path: Path, problems: Problems):
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start}); expected a JSON or Parquet "
                         "predictions file", where=str(path)) from None
    if not text.strip():
        raise InputError("the file is empty; expected a JSON or Parquet predictions file", where=str(path))
    try:
        doc = parse_json(text, where=str(path))
    except json.JSONDecodeError as exc:
        body = text.rstrip()
        # An object ends with "}": an error in the last few characters of a text that does
        # not is a cut-off file (e.g. "1." or "tru" at the end).
        ends_early = exc.pos >= len(body) or (0 < exc.pos and exc.pos >= len(body) - 8
                                              and not body.endswith("}"))
        hint = "the file ends early (truncated?)" if ends_early else exc.msg
        raise InputError(f"not valid JSON: {hint} at line {exc.lineno} column {exc.colno}",
                         where=str(path)) from None
    header = check_header(doc, path, problems)
    if header is None:
        return None
    samples = doc.get("samples")
    if "samples" not in doc:
        problems.add("/samples", "missing required field 'samples' (one entry per sample)")
    if not isinstance(samples, list) or not samples:
        return None  # the header check reported it
    checked = check_samples(samples, problems)
    if checked is None:
        return None
    return (header, *checked)


def check_header(doc, path: Path, problems: Problems) -> dict | None:
    """Check format and version (raising at once: nothing else can be read), then the
    schema of everything but the samples. Returns the header, or None after problems."""
    if not isinstance(doc, dict):
        raise InputError(f"expected a JSON object with \"format\": \"{FORMAT_NAME}\", got "
                         f"{json_type(doc) if not isinstance(doc, (int, float)) else 'a number'}",
                         where=str(path))
    if doc.get("format") != FORMAT_NAME:
        got = "no \"format\" field" if "format" not in doc else f"format {doc['format']!r}"
        raise InputError(f"unknown file format: {got}; expected \"format\": \"{FORMAT_NAME}\"",
                         where=f"{path}: /format")
    version = doc.get("format_version")
    if type(version) is not int or version != FORMAT_VERSION:
        raise InputError(f"unsupported format version {version!r}; this flowgauge reads "
                         f"format_version {FORMAT_VERSION}", where=f"{path}: /format_version")
    before = problems.count
    for p in schema_problems(header_validator(), doc):
        problems.add(p.where, p.message)
    if problems.count > before:
        return None
    return {k: doc[k] for k in HEADER_KEYS}
