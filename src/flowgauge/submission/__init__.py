"""Predictions files: the format (JSON or Parquet, JSON Schema in ``schema/``), loading into
arrays, validation against the split, and writing from arrays."""

from __future__ import annotations

from ._format import (
    DEFAULT_MAX_BYTES, FORMAT_NAME, FORMAT_VERSION, SCHEMA_PATH, Problem, format_problems,
    predictions_schema,
)
from ._predictions import Predictions, load_predictions
from ._validate import ValidationReport, check_predictions, validate_predictions
from ._write import write_predictions

__all__ = [
    "FORMAT_NAME", "FORMAT_VERSION", "SCHEMA_PATH", "DEFAULT_MAX_BYTES",
    "Predictions", "Problem", "ValidationReport",
    "load_predictions", "validate_predictions", "check_predictions", "write_predictions",
    "predictions_schema", "format_problems",
]
