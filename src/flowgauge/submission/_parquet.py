"""The Parquet layout of a predictions file: one row per sample, the header as canonical JSON
in the key-value metadata under ``flowgauge``."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .._io import canonical_json, clip_text, parse_json
from ..errors import InputError
from ._format import ARRAY_FIELDS, PARQUET_KEY, REQUIRED_FIELDS, SAMPLE_KEYS, Problems

__all__ = ["read_parquet", "parquet_bytes"]

_LIST_TYPES = (pa.types.is_list, pa.types.is_large_list, pa.types.is_fixed_size_list)


def read_parquet(data: bytes, path: Path, problems: Problems, max_bytes: int | None = None):
    """``(header, sample_id, {field: array or None}, inference_ms)`` in file order, or None."""
    table = _read_table(data, path, max_bytes)
    header = _header(table, path, problems)
    if header is None:
        return None
    columns = set(table.column_names)
    for name in sorted(columns - set(SAMPLE_KEYS)):
        problems.add(f"column {name}", f"unknown column; a predictions table has {', '.join(SAMPLE_KEYS)}")
    for name in ("sample_id", *REQUIRED_FIELDS):
        if name not in columns:
            problems.add(f"column {name}", "missing required column")
    if table.num_rows == 0:
        problems.add("rows", "the table has no rows; expected one row per sample")
    if problems:
        return None
    sample_id = _sample_id(table.column("sample_id"), problems)
    arrays = {f: _list_column(table.column(f), f, problems) if f in columns else None
              for f in ARRAY_FIELDS}
    inference_ms = (_inference_ms(table.column("inference_ms"), problems)
                    if "inference_ms" in columns else np.full(table.num_rows, np.nan))
    if problems:
        return None
    return header, sample_id, arrays, inference_ms


def _read_table(data: bytes, path: Path, max_bytes: int | None) -> pa.Table:
    """The table, read in this thread only, with the plain file reader: ``pq.read_table`` goes
    through the dataset scanner and its thread pools, and a process that exited right after
    such a read of a corrupt or empty file sometimes aborted in the pools' teardown
    ("terminate called without an active exception", exit 134). The footer's uncompressed size is checked against ``max_bytes``
    first, so a small file cannot expand into memory without bound."""
    try:
        reader = pq.ParquetFile(pa.BufferReader(data), pre_buffer=False)
        meta = reader.metadata
        expanded = sum(meta.row_group(i).total_byte_size for i in range(meta.num_row_groups))
        if max_bytes is not None and expanded > max_bytes:
            raise InputError(f"the Parquet data expand to {expanded:,} bytes, over the limit of "
                             f"{max_bytes:,} bytes (raise it with --max-bytes, or max_bytes= in Python)",
                             where=str(path))
        return reader.read(use_threads=False)
    except InputError:
        raise
    except Exception as exc:  # noqa: BLE001 - untrusted bytes: any reader failure is bad input
        detail = " ".join(f"{type(exc).__name__}: {exc}".split())
        raise InputError(f"not a readable Parquet file ({clip_text(detail)})", where=str(path)) from None


def _header(table: pa.Table, path: Path, problems: Problems):
    from ._predictions import check_header
    meta = table.schema.metadata or {}
    if PARQUET_KEY not in meta:
        raise InputError("the Parquet key-value metadata has no 'flowgauge' key holding the header "
                         "(format, format_version, split, model)", where=str(path))
    where = f"{path}: metadata flowgauge"
    try:
        doc = parse_json(meta[PARQUET_KEY].decode("utf-8"), where=where)
    except InputError:
        raise
    except UnicodeDecodeError as exc:
        raise InputError(f"the header is not UTF-8 text (byte {exc.start})", where=where) from None
    except ValueError as exc:  # json.JSONDecodeError
        raise InputError(f"the header is not valid JSON ({exc})", where=where) from None
    header = check_header(doc, path, problems)
    if header is not None and "samples" in doc:
        problems.add("metadata flowgauge: /samples", "the Parquet header holds no samples; they are the rows")
        return None
    return header


def _sample_id(col: pa.ChunkedArray, problems: Problems) -> np.ndarray:
    if not pa.types.is_integer(col.type):
        problems.add("column sample_id", f"has type {col.type}; expected int64")
        return np.zeros(len(col), dtype=np.int64)
    for r in _null_rows(col):
        problems.add(f"column sample_id, row {r}", "is null; expected an integer")
    ids = col.to_numpy(zero_copy_only=False) if col.null_count == 0 else np.zeros(len(col))
    if pa.types.is_unsigned_integer(col.type) and (ids > 2**63 - 1).any():
        for r in np.flatnonzero(ids > 2**63 - 1):
            problems.add(f"column sample_id, row {r}", f"sample id {ids[r]} is out of range")
        return np.zeros(len(col), dtype=np.int64)
    ids = ids.astype(np.int64)
    for r in np.flatnonzero(ids < 0):
        problems.add(f"column sample_id, row {r}", f"sample id {ids[r]} is negative")
    return ids


def _null_rows(col: pa.ChunkedArray) -> np.ndarray:
    if col.null_count == 0:
        return np.zeros(0, dtype=np.int64)
    return np.flatnonzero(col.is_null().to_numpy(zero_copy_only=False))


def _list_column(col: pa.ChunkedArray, field: str, problems: Problems) -> np.ndarray | None:
    """A list<float64> (or fixed_size_list) column as shape (rows, width) float64."""
    expected = "list<double> or fixed_size_list<double> (float64 numbers)"
    if not any(t(col.type) for t in _LIST_TYPES) or not pa.types.is_float64(col.type.value_type):
        problems.add(f"column {field}", f"has type {col.type}; expected {expected}")
        return None
    start = problems.count
    for r in _null_rows(col):
        problems.add(f"column {field}, row {r}", "is null; give the column for every row or drop it")
    if problems.count > start:
        return None
    lens = pc.list_value_length(col).to_numpy(zero_copy_only=False).astype(np.int64)
    width = int(np.bincount(lens[lens > 0]).argmax()) if (lens > 0).any() else 0
    for r in np.flatnonzero((lens == 0) | (lens != width)):
        problems.add(f"column {field}, row {r}", f"has {lens[r]} numbers but the other rows have {width}"
                     if lens[r] else "is empty; expected one number per element")
    if problems.count > start:
        return None
    flat = pc.list_flatten(col)
    if flat.null_count:
        nulls = np.flatnonzero(flat.is_null().to_numpy(zero_copy_only=False))
        for k in nulls:
            problems.add(f"column {field}, row {k // width}, item {k % width}", "is null; expected a number")
        return None
    return flat.to_numpy().reshape(len(col), width) + 0.0  # + 0.0 turns -0.0 into 0.0


def _inference_ms(col: pa.ChunkedArray, problems: Problems) -> np.ndarray:
    if not pa.types.is_float64(col.type):
        problems.add("column inference_ms", f"has type {col.type}; expected double (float64)")
        return np.zeros(len(col))
    values = col.to_numpy(zero_copy_only=False).astype(np.float64)  # nulls become NaN
    given = ~col.is_null().to_numpy(zero_copy_only=False)
    for r in np.flatnonzero(given & ~np.isfinite(values)):
        problems.add(f"column inference_ms, row {r}",
                     f"{values[r]!r} is not allowed; give a finite number of milliseconds or null")
    for r in np.flatnonzero(given & (values < 0)):
        problems.add(f"column inference_ms, row {r}", f"{values[r]!r} ms is negative")
    return values


def parquet_bytes(header: dict, sample_id: np.ndarray, arrays: dict, inference_ms: np.ndarray) -> bytes:
    """The Parquet layout of predictions whose arrays are already checked."""
    cols = {"sample_id": pa.array(np.asarray(sample_id, dtype=np.int64), type=pa.int64())}
    for f in ARRAY_FIELDS:
        a = arrays.get(f)
        if a is not None:
            flat = pa.array(np.ascontiguousarray(a, dtype=np.float64).ravel(), type=pa.float64())
            cols[f] = pa.FixedSizeListArray.from_arrays(flat, a.shape[1])
    ms = np.asarray(inference_ms, dtype=np.float64)
    if not np.isnan(ms).all():
        cols["inference_ms"] = pa.array(ms, type=pa.float64(), mask=np.isnan(ms))
    table = pa.table(cols).replace_schema_metadata({PARQUET_KEY: canonical_json(header)})
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, compression="zstd")
    return sink.getvalue().to_pybytes()
