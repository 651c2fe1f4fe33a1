"""The predictions file format: names, the JSON Schema, and the problems a check reports."""

from __future__ import annotations

import copy
import json
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import jsonschema

__all__ = [
    "FORMAT_NAME", "FORMAT_VERSION", "PARQUET_KEY", "SCHEMA_PATH", "DEFAULT_MAX_BYTES",
    "GEN_FIELDS", "BUS_FIELDS", "ARRAY_FIELDS", "REQUIRED_FIELDS", "OPTIONAL_FIELDS",
    "SAMPLE_KEYS", "HEADER_KEYS", "VM_PLAUSIBLE_PU", "GEN_PLAUSIBLE_FACTOR", "VA_PLAUSIBLE_DEG",
    "SHOWN_ERRORS", "KEPT_ERRORS",
    "Problem", "Problems", "predictions_schema", "header_validator", "model_validator",
    "schema_problems", "format_problems",
]

FORMAT_NAME = "flowgauge-predictions"
FORMAT_VERSION = 1
PARQUET_KEY = b"flowgauge"  # Parquet key-value metadata key holding the header
SCHEMA_PATH = Path(__file__).resolve().parent.parent / "schema" / "predictions.schema.json"
# Largest predictions file read by default. Parsing JSON needs memory in proportion to the
# file: measured 5.4 to 6.2 bytes per file byte for a normal predictions file (ieee118, all
# four fields) and 26 bytes per byte for the worst case, a file of empty arrays or objects
# ("[[],[],...]"). At 200 MB that is about 1.2 GB for a normal file and at most about 5.2 GB
# for a hostile one (docs/submission.md). A normal 10,000-sample ieee300 file is about 90 MB.
DEFAULT_MAX_BYTES = 200 * 10**6

GEN_FIELDS = ("pg_mw", "qg_mvar")  # one number per generator, in the manifest's gen_id order
BUS_FIELDS = ("vm_pu", "va_deg")  # one number per bus, in the manifest's bus_id order
ARRAY_FIELDS = ("pg_mw", "vm_pu", "va_deg", "qg_mvar")
REQUIRED_FIELDS = ("pg_mw", "vm_pu")
OPTIONAL_FIELDS = ("va_deg", "qg_mvar")  # each present for every sample or for none
SAMPLE_KEYS = ("sample_id", *ARRAY_FIELDS, "inference_ms")
HEADER_KEYS = ("format", "format_version", "split", "model")

# Plausibility of units (checked by validation, documented in docs/submission.md).
VM_PLAUSIBLE_PU = (0.5, 1.5)  # outside: a value in kV, or a scaling slip
VA_PLAUSIBLE_DEG = 360.0  # |va_deg| above: not degrees
GEN_PLAUSIBLE_FACTOR = 10.0  # |pg_mw|, |qg_mvar| above 10 x max(|limits|, base_mva): kW / kVAr?

SHOWN_ERRORS = 20  # errors printed before "... and N more errors"
KEPT_ERRORS = 1000  # errors kept in a report; the rest are only counted


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a predictions file.

    ``where`` is a JSON pointer (``/samples/3/vm_pu/7``) or a Parquet column and row
    (``column vm_pu, row 3, item 7``); ``sample_id`` is the sample concerned, if known.
    """

    where: str
    message: str
    sample_id: int | None = None

    def __str__(self) -> str:
        sample = f" (sample {self.sample_id})" if self.sample_id is not None else ""
        return f"{self.where}{sample}: {self.message}"


class Problems:
    """Collects problems: keeps the first ``KEPT_ERRORS``, counts them all."""

    def __init__(self) -> None:
        self.kept: list[Problem] = []
        self.count = 0

    def add(self, where: str, message: str, sample_id: int | None = None) -> None:
        self.count += 1
        if len(self.kept) < KEPT_ERRORS:
            sid = None if sample_id is None else int(sample_id)
            self.kept.append(Problem(where, message, sid))

    def add_counted(self, total: int, problems) -> None:
        """Add ``total`` problems of which ``problems`` yields (at least) the first ones."""
        start = self.count
        for p in problems:
            if len(self.kept) >= KEPT_ERRORS or self.count - start >= total:
                break
            self.add(p.where, p.message, p.sample_id)
        self.count = start + total

    def __bool__(self) -> bool:
        return self.count > 0


def format_problems(problems: list[Problem] | tuple[Problem, ...], count: int,
                    limit: int = SHOWN_ERRORS) -> str:
    """Plain text: the first ``limit`` problems, one per line, then "... and N more errors"."""
    if count == 0:
        return "no errors: the predictions are valid"
    noun = "error" if count == 1 else "errors"
    lines = [f"{count} {noun} in the predictions file:"]
    lines += [f"  {p}" for p in list(problems)[:limit]]
    if count > limit:
        rest = count - limit
        lines.append(f"  ... and {rest} more error{'s' if rest != 1 else ''}")
    return "\n".join(lines)


@lru_cache(maxsize=1)
def predictions_schema() -> dict:
    """The JSON Schema (2020-12) of a predictions file, as a dict."""
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


@lru_cache(maxsize=1)
def header_validator() -> jsonschema.Draft202012Validator:
    """Validates everything but the samples (those are checked with numpy, see ``_samples``)."""
    schema = copy.deepcopy(predictions_schema())
    schema["required"] = [k for k in schema["required"] if k != "samples"]
    schema["properties"]["samples"] = {"type": "array", "minItems": 1}
    return jsonschema.Draft202012Validator(schema)


@lru_cache(maxsize=1)
def model_validator() -> jsonschema.Draft202012Validator:
    schema = predictions_schema()
    return jsonschema.Draft202012Validator({**schema["$defs"]["model"], "$defs": schema["$defs"]})


def _pointer(path) -> str:
    parts = [str(p).replace("~", "~0").replace("/", "~1") for p in path]
    return "/" + "/".join(parts) if parts else "/"


def schema_problems(validator: jsonschema.Draft202012Validator, instance,
                    prefix: tuple = ()) -> list[Problem]:
    """Schema errors as problems, ordered by JSON pointer (deterministic)."""
    errors = sorted(validator.iter_errors(instance),
                    key=lambda e: (_pointer(e.absolute_path), e.message))
    return [Problem(_pointer((*prefix, *e.absolute_path)), _message(e)) for e in errors]


def _message(error: jsonschema.ValidationError) -> str:
    if error.validator == "additionalProperties":
        return f"{error.message}; allowed: {', '.join(sorted(error.schema.get('properties', {})))}"
    if error.validator == "pattern" and "split_hash" in error.absolute_path:
        return f"{error.instance!r} is not a split hash (expected 64 lowercase hexadecimal digits)"
    if error.validator == "const":
        return f"expected {error.validator_value!r}, got {error.instance!r}"
    return error.message
