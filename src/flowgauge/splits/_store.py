"""Parquet storage of split inputs and references, and their format-independent hashes.

Per-element arrays are stored as ``fixed_size_list<float64>[n]`` columns, one row per sample;
per-sample in-service flags (optional) as ``fixed_size_list<bool>[n]``.
Hashes are :func:`flowgauge._io.hash_arrays` over the columns as numpy arrays (never over the
Parquet bytes), so another pyarrow version or compression gives the same hash.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute  # noqa: F401 (pa.compute)
import pyarrow.parquet as pq

from .._io import atomic_write_bytes, hash_arrays
from ..errors import InputError

__all__ = [
    "INPUTS_FILE", "REFERENCES_FILE", "MANIFEST_FILE", "STORED_DIGITS",
    "References", "round_array", "inputs_table", "references_table", "table_columns",
    "columns_hash", "solution_hash", "write_table", "read_table", "inputs_from_table",
    "references_from_table", "kinds_from_table", "state_from_table", "shunt_state_from_table", "STATE_COLUMNS",
    "SHUNT_COLUMN", "BINDING_SEP",
]

INPUTS_FILE = "inputs.parquet"
REFERENCES_FILE = "references.parquet"
MANIFEST_FILE = "manifest.json"
# Floats are stored rounded to this many significant digits: far below solver tolerance, and it
# makes the stored bytes independent of last-bit noise.
STORED_DIGITS = 10
# Separator joining a sample's binding-limit labels when hashing (labels never contain it).
BINDING_SEP = "\x1e"
# Columns left out of the solution hash: measurements of this machine, not results.
TIMING_COLUMNS = ("solve_seconds",)

# Optional inputs columns: per-sample in-service flags in the manifest's branch / generator order.
STATE_COLUMNS = ("branch_in_service", "gen_in_service")
# Optional beside them: per-sample flags of the bus shunts, in the manifest's bus order.
SHUNT_COLUMN = "shunt_in_service"

_VECTOR_REF = ("pg_mw", "qg_mvar", "vm_pu", "va_deg")
_SCALAR_REF_FLOAT = ("objective_per_h", "max_p_mismatch_mw", "max_q_mismatch_mvar",
                     "max_limit_violation", "solve_seconds", "margin")


@dataclass(frozen=True)
class References:
    """Reference AC-OPF solutions of a split, one row per sample.

    ``pg_mw``, ``qg_mvar``: shape (S, n_gen) [MW], [MVAr]; ``vm_pu``: shape (S, n_bus) [p.u.];
    ``va_deg``: shape (S, n_bus) [deg]; ``objective``: shape (S,) [$/h]; ``status``: shape (S,)
    str; ``iterations``: (S,) int; ``max_p_mismatch_mw``, ``max_q_mismatch_mvar``,
    ``max_limit_violation``, ``solve_seconds`` [s]: (S,); ``margin``: (S,) fraction of the maximum
    loadability (NaN outside the edge split); ``binding``: tuple of S tuples of limit labels;
    ``signature``: (S,) str.
    """

    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray
    objective: np.ndarray
    status: np.ndarray
    iterations: np.ndarray
    max_p_mismatch_mw: np.ndarray
    max_q_mismatch_mvar: np.ndarray
    max_limit_violation: np.ndarray
    solve_seconds: np.ndarray
    margin: np.ndarray
    binding: tuple
    signature: np.ndarray
    regime_seen_in_train: np.ndarray | None = None  # (S,) bool; test splits built beside a train split

    def __getitem__(self, key: str):
        # dict-style access, e.g. refs["pg_mw"]
        if key == "objective_per_h":
            key = "objective"
        return getattr(self, key)


def round_array(a: np.ndarray, digits: int = STORED_DIGITS) -> np.ndarray:
    """``a`` rounded to ``digits`` significant digits (NaN and 0 kept), same shape."""
    a = np.asarray(a, dtype=np.float64)
    out = a.copy()
    ok = np.isfinite(a) & (a != 0.0)
    if np.any(ok):
        mag = np.floor(np.log10(np.abs(a[ok])))
        scale = 10.0 ** (digits - 1 - mag)
        out[ok] = np.round(a[ok] * scale) / scale
    out[out == 0.0] = 0.0  # no negative zero
    return out


def _fixed(matrix: np.ndarray) -> pa.FixedSizeListArray:
    m = np.ascontiguousarray(matrix, dtype=np.float64)
    return pa.FixedSizeListArray.from_arrays(pa.array(m.ravel(), pa.float64()), m.shape[1])


def _fixed_bool(matrix: np.ndarray) -> pa.FixedSizeListArray:
    m = np.ascontiguousarray(matrix, dtype=bool)
    return pa.FixedSizeListArray.from_arrays(pa.array(m.ravel(), pa.bool_()), m.shape[1])


def inputs_table(sample_id: np.ndarray, pd_mw: np.ndarray, qd_mvar: np.ndarray, kind=None,
                 branch_in_service: np.ndarray | None = None, gen_in_service: np.ndarray | None = None,
                 shunt_in_service: np.ndarray | None = None) -> pa.Table:
    """Inputs table: ``sample_id`` (S,), ``pd_mw``, ``qd_mvar`` (S, n_load) [MW], [MVAr], and
    optionally ``kind`` (S,) str: which kind of draw of its design produced each sample, and the
    per-sample state ``branch_in_service`` (S, n_branch) and ``gen_in_service`` (S, n_gen) bool
    (both or neither), with, optionally, ``shunt_in_service`` (S, n_bus) bool. Without the
    optional arguments the table is exactly that of splits written before per-sample states."""
    data = {
        "sample_id": pa.array(np.asarray(sample_id, np.int64)),
        "pd_mw": _fixed(round_array(pd_mw)),
        "qd_mvar": _fixed(round_array(qd_mvar)),
    }
    if kind is not None:
        data["kind"] = pa.array([str(k) for k in kind], pa.string())
    if (branch_in_service is None) != (gen_in_service is None):
        raise InputError("give both branch_in_service and gen_in_service, or neither", where="inputs_table")
    if shunt_in_service is not None and branch_in_service is None:
        raise InputError("shunt_in_service needs branch_in_service and gen_in_service", where="inputs_table")
    if branch_in_service is not None:
        n_s = len(data["sample_id"])
        names, values = list(STATE_COLUMNS), [branch_in_service, gen_in_service]
        if shunt_in_service is not None:
            names.append(SHUNT_COLUMN)
            values.append(shunt_in_service)
        for name, flags in zip(names, values):
            a = np.asarray(flags)
            if a.dtype.kind != "b" or a.ndim != 2 or a.shape[0] != n_s:
                raise InputError(f"expected a bool array of shape ({n_s}, n), got {a.dtype} {a.shape}", where=name)
            data[name] = _fixed_bool(a)
    return pa.table(data)


def references_table(sample_id: np.ndarray, cols: dict) -> pa.Table:
    """References table from per-sample arrays (see :class:`References` for shapes)."""
    data = {"sample_id": pa.array(np.asarray(sample_id, np.int64))}
    for name in _VECTOR_REF:
        data[name] = _fixed(round_array(cols[name]))
    for name in _SCALAR_REF_FLOAT:
        v = round_array(cols[name])
        data[name] = pa.array(v, pa.float64(), mask=np.isnan(v)) if name == "margin" else pa.array(v)
    data["status"] = pa.array([str(s) for s in cols["status"]], pa.string())
    data["iterations"] = pa.array(np.asarray(cols["iterations"], np.int64))
    data["binding"] = pa.array([list(b) for b in cols["binding"]], pa.list_(pa.string()))
    data["signature"] = pa.array([str(s) for s in cols["signature"]], pa.string())
    order = ["sample_id", *_VECTOR_REF, "objective_per_h", "status", "iterations", "max_p_mismatch_mw",
             "max_q_mismatch_mvar", "max_limit_violation", "solve_seconds", "binding", "signature", "margin"]
    if cols.get("regime_seen_in_train") is not None:  # test splits built beside a train split
        data["regime_seen_in_train"] = pa.array(np.asarray(cols["regime_seen_in_train"], np.int64))
        order.append("regime_seen_in_train")
    return pa.table({k: data[k] for k in order})


def _column_array(col: pa.ChunkedArray, name: str) -> np.ndarray:
    col = col.combine_chunks() if isinstance(col, pa.ChunkedArray) else col
    t = col.type
    if pa.types.is_fixed_size_list(t) and pa.types.is_boolean(t.value_type):
        return _bool_list_array(col, name, t.list_size)
    if (pa.types.is_list(t) or pa.types.is_large_list(t)) and pa.types.is_boolean(t.value_type):
        return _bool_list_array(col, name, None)  # e.g. rewritten by pandas as list<bool>
    if pa.types.is_fixed_size_list(t):
        flat = col.flatten().to_numpy(zero_copy_only=False)
        return flat.astype(np.float64, copy=False).reshape(len(col), t.list_size)
    if (pa.types.is_list(t) or pa.types.is_large_list(t)) and pa.types.is_floating(t.value_type):
        return _variable_list_array(col, name)  # e.g. rewritten by pandas as list<double>
    if (pa.types.is_list(t) or pa.types.is_large_list(t)) and pa.types.is_string(t.value_type):
        return np.array([BINDING_SEP.join(x) for x in col.to_pylist()], dtype=object)
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        return np.array(col.to_pylist(), dtype=object)
    if pa.types.is_floating(t):
        return col.to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
    if pa.types.is_integer(t):
        return col.to_numpy(zero_copy_only=False).astype(np.int64, copy=False)
    raise InputError(f"unexpected column type {t}", where=f"column {name}")


def _variable_list_array(col: pa.Array, name: str) -> np.ndarray:
    """A ``list<double>`` column of equal-length rows as (rows, width) float64, as if it were
    stored ``fixed_size_list``; rows of unequal length or nulls are a damaged file."""
    lengths = pa.compute.list_value_length(col).to_numpy(zero_copy_only=False)
    if col.null_count or (lengths.size and np.any(lengths != lengths[0])):
        raise InputError("expected one number per element in every row (rows of different lengths or "
                         "nulls)", where=f"column {name}")
    width = int(lengths[0]) if lengths.size else 0
    flat = col.flatten().to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
    return flat.reshape(len(col), width)


def _bool_list_array(col: pa.Array, name: str, width: int | None) -> np.ndarray:
    """A list column of flags as (rows, width) bool; nulls (a row or a flag) and rows of unequal
    length are a damaged file."""
    lengths = pa.compute.list_value_length(col).to_numpy(zero_copy_only=False)
    flat = col.flatten()
    if col.null_count or flat.null_count or (lengths.size and np.any(lengths != lengths[0])):
        raise InputError("expected one true/false flag per element in every row (nulls or rows of "
                         "different lengths)", where=f"column {name}")
    if width is None:
        width = int(lengths[0]) if lengths.size else 0
    return flat.to_numpy(zero_copy_only=False).astype(bool, copy=False).reshape(len(col), width)


def table_columns(table: pa.Table) -> dict[str, np.ndarray]:
    """The columns as numpy arrays, in the form that is hashed (nulls as NaN)."""
    return {name: _column_array(table.column(name), name) for name in table.column_names}


def columns_hash(table: pa.Table) -> str:
    """Content hash of every column of the table."""
    return hash_arrays(table_columns(table))


def solution_hash(table: pa.Table) -> str:
    """Content hash of a references table without the timing columns: reproducible by a rebuild."""
    cols = table_columns(table)
    return hash_arrays({k: v for k, v in cols.items() if k not in TIMING_COLUMNS})


def write_table(table: pa.Table, path: Path) -> None:
    """Write a Parquet file atomically (zstd compressed, no pandas metadata)."""
    sink = pa.BufferOutputStream()
    pq.write_table(table.replace_schema_metadata(None), sink, compression="zstd")
    atomic_write_bytes(path, sink.getvalue().to_pybytes())


def read_table(path: Path, columns: list[str] | None = None) -> pa.Table:
    try:
        # the plain file reader, in this thread: no dataset scanner thread pools (see submission/_parquet.py)
        with pq.ParquetFile(path, pre_buffer=False) as f:
            return f.read(columns=columns, use_threads=False)
    except FileNotFoundError:
        raise InputError("no such file", where=str(path)) from None
    except (pa.ArrowInvalid, OSError, KeyError) as exc:
        raise InputError(f"not a readable Parquet file of this layout ({exc})", where=str(path)) from None


def _require(table: pa.Table, names: tuple, path: Path) -> None:
    missing = [n for n in names if n not in table.column_names]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)}", where=str(path))


def inputs_from_table(table: pa.Table, path: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(sample_id (S,), pd_mw (S, n_load) [MW], qd_mvar (S, n_load) [MVAr])."""
    _require(table, ("sample_id", "pd_mw", "qd_mvar"), path)
    return (_column_array(table.column("sample_id"), "sample_id"),
            _column_array(table.column("pd_mw"), "pd_mw"),
            _column_array(table.column("qd_mvar"), "qd_mvar"))


def state_from_table(table: pa.Table, path: Path, n_branch: int,
                     n_gen: int) -> tuple[np.ndarray, np.ndarray] | None:
    """(``branch_in_service`` (S, n_branch), ``gen_in_service`` (S, n_gen)) bool, or None for
    inputs without per-sample states. One column without the other, a column that is not flags,
    or a width other than the manifest's element count raises :class:`InputError`."""
    have = [n for n in STATE_COLUMNS if n in table.column_names]
    if not have:
        return None
    if len(have) == 1:
        missing = [n for n in STATE_COLUMNS if n not in have][0]
        raise InputError(f"column {have[0]} is present but {missing} is not (expected both or neither)",
                         where=str(path))
    return tuple(_flag_column(table, name, n, path) for name, n in zip(STATE_COLUMNS, (n_branch, n_gen)))


def shunt_state_from_table(table: pa.Table, path: Path, n_bus: int) -> np.ndarray | None:
    """``shunt_in_service`` (S, n_bus) bool, or None for inputs without it. The column without
    the branch and generator state columns, or of another type or width, raises
    :class:`InputError`."""
    if SHUNT_COLUMN not in table.column_names:
        return None
    if not all(n in table.column_names for n in STATE_COLUMNS):
        raise InputError(f"column {SHUNT_COLUMN} is present but {' and '.join(STATE_COLUMNS)} are not "
                         "(bus shunt flags are part of a per-sample state)", where=str(path))
    return _flag_column(table, SHUNT_COLUMN, n_bus, path)


def _flag_column(table: pa.Table, name: str, n: int, path: Path) -> np.ndarray:
    """One column of per-sample flags as a bool array (S, n), checked."""
    col = table.column(name)
    t = col.type
    if not ((pa.types.is_fixed_size_list(t) or pa.types.is_list(t) or pa.types.is_large_list(t))
            and pa.types.is_boolean(t.value_type)):
        raise InputError(f"expected a list of true/false flags per sample, got column type {t}",
                         where=f"{path}: column {name}")
    _check_state_widths(table, col, name, n, path)
    try:
        a = _column_array(col, name)
    except InputError as exc:
        raise InputError(exc.message, where=f"{path}: {exc.where}") from None
    if a.shape != (table.num_rows, n):
        raise InputError(f"expected {n} flags per sample (the manifest's element count), got shape "
                         f"{a.shape}", where=f"{path}: column {name}")
    return a


def _check_state_widths(table: pa.Table, col: pa.ChunkedArray, name: str, n: int, path: Path) -> None:
    """The first sample whose flag list is not ``n`` long (or is null), named by its id."""
    import pyarrow.compute as pc
    if table.num_rows == 0:
        return
    lengths = pc.list_value_length(col).to_numpy(zero_copy_only=False)
    bad = np.flatnonzero(np.isnan(lengths.astype(float)) | (lengths != n))
    if bad.size:
        i = int(bad[0])
        sid = table.column("sample_id")[i].as_py() if "sample_id" in table.column_names else i
        got = "no list" if np.isnan(float(lengths[i])) else f"{int(lengths[i])}"
        raise InputError(f"expected {n} flags (the manifest's element count, one per element in its "
                         f"order), got {got}", where=f"{path}: sample {sid}: column {name}")


def kinds_from_table(table: pa.Table) -> np.ndarray | None:
    """The inputs' ``kind`` column (S,) str, or None for splits written without it."""
    if "kind" not in table.column_names:
        return None
    return _column_array(table.column("kind"), "kind").astype(str)


def references_from_table(table: pa.Table, path: Path) -> References:
    names = ("sample_id", *_VECTOR_REF, "objective_per_h", "status", "iterations", "max_p_mismatch_mw",
             "max_q_mismatch_mvar", "max_limit_violation", "solve_seconds", "binding", "signature", "margin")
    _require(table, names, path)
    c = {n: _column_array(table.column(n), n) for n in names if n != "binding"}
    binding = tuple(tuple(b) for b in table.column("binding").to_pylist())
    return References(
        pg_mw=c["pg_mw"], qg_mvar=c["qg_mvar"], vm_pu=c["vm_pu"], va_deg=c["va_deg"],
        objective=c["objective_per_h"], status=c["status"].astype(str), iterations=c["iterations"],
        max_p_mismatch_mw=c["max_p_mismatch_mw"], max_q_mismatch_mvar=c["max_q_mismatch_mvar"],
        max_limit_violation=c["max_limit_violation"], solve_seconds=c["solve_seconds"],
        margin=c["margin"], binding=binding, signature=c["signature"].astype(str),
        regime_seen_in_train=(None if "regime_seen_in_train" not in table.column_names else
                              _column_array(table.column("regime_seen_in_train"), "regime_seen_in_train") == 1))
