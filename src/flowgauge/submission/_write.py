"""Writing a predictions file from arrays shaped like a split's references."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from .._io import atomic_write_bytes, canonical_json
from ..errors import InputError
from ._format import FORMAT_NAME, FORMAT_VERSION, format_problems, model_validator, schema_problems
from ._predictions import Predictions, make_predictions

__all__ = ["write_predictions", "round_sig_array"]

_FORMATS = ("json", "parquet")


def round_sig_array(a, digits: int = 10) -> np.ndarray:
    """Round every value to ``digits`` significant digits exactly as canonical JSON does
    (the double nearest the correctly rounded decimal; -0.0 becomes 0.0), vectorised.

    With ``k = digits - 1 - floor(log10|x|)``, the integer ``N = round(x * 10**k)`` is exact
    and ``N / 10**k`` is correctly rounded when ``10**|k|`` is exact (``|k| <= 22``). Values
    outside that range, near a rounding tie, or where ``log10`` misjudged the digit count
    are rounded through their decimal text instead.
    """
    a = np.asarray(a, dtype=np.float64)
    flat = a.ravel()
    out = np.zeros_like(flat)
    ax = np.abs(flat)
    nonzero = np.isfinite(flat) & (ax > 0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        k = digits - 1 - np.floor(np.log10(np.where(nonzero, ax, 1.0)))
        k = np.clip(k, -22, 22)
        pos = k >= 0
        p10 = 10.0 ** np.abs(k)
        scaled = np.where(pos, flat * p10, flat / p10)
        n = np.round(scaled)
        out = np.where(pos, n / p10, n * p10)
        near_tie = np.abs(np.abs(scaled - np.trunc(scaled)) - 0.5) < 1e-4
        exact_range = (ax >= 1e-12) & (ax < 1e22)
        digits_ok = (np.abs(n) >= 10.0 ** (digits - 1)) & (np.abs(n) <= 10.0 ** digits)
    slow = nonzero & ~(exact_range & digits_ok & ~near_tie)
    out = np.where(nonzero, out, flat)
    if slow.any():
        fmt = f"{{:.{digits - 1}e}}".format
        out[slow] = np.array(list(map(float, map(fmt, flat[slow].tolist()))), dtype=np.float64)
    return (out + 0.0).reshape(a.shape)


def write_predictions(split, *, pg_mw, vm_pu, va_deg=None, qg_mvar=None, inference_ms=None,
                      model: dict, path: str | os.PathLike, format: str | None = None) -> Predictions:
    """Write a valid predictions file for ``split`` (a loaded split or a split folder).

    Rows follow ``split.sample_id``; columns the manifest's element order.
    ``pg_mw`` shape (S, n_gen) [MW]; ``vm_pu`` (S, n_bus) [p.u.]; optional ``va_deg``
    (S, n_bus) [degrees], ``qg_mvar`` (S, n_gen) [MVAr], ``inference_ms`` (S,) [ms] (NaN: not
    reported). ``model``: name, authors, description, training_data_only, optional link and
    inference_hardware. ``format``: "json" or "parquet" (default: from the file suffix).
    Numbers are rounded to 10 significant digits in both formats. The file is checked like
    ``flowgauge validate`` before it is written (atomically); returns the written predictions.
    """
    from ._validate import validate_predictions
    if not hasattr(split, "sample_id"):
        from ..splits import load_split
        split = load_split(split, references=False)
    fmt = _format_of(Path(path), format)
    header = _header(split, model)
    arrays = _arrays(split, pg_mw=pg_mw, vm_pu=vm_pu, va_deg=va_deg, qg_mvar=qg_mvar)
    ms = _inference_ms(inference_ms, len(split.sample_id))
    ids = np.asarray(split.sample_id, dtype=np.int64)
    pred = make_predictions(header, ids, arrays, ms, None, Path(path))
    report = validate_predictions(pred, split)
    if not report.valid:
        raise InputError(format_problems(report.errors, report.n_errors).replace(
            "in the predictions file", "in the arrays to write"), where="write_predictions")
    if fmt == "json":
        data = _json_bytes(header, ids, arrays, ms)
    else:
        from ._parquet import parquet_bytes
        data = parquet_bytes(header, ids, arrays, ms)
    atomic_write_bytes(path, data)
    return make_predictions(header, ids, arrays, ms, fmt, Path(path))


def _format_of(path: Path, format: str | None) -> str:
    if format is None:
        suffix = path.suffix.lower()
        format = {".json": "json", ".parquet": "parquet", ".pq": "parquet"}.get(suffix)
        if format is None:
            raise InputError(f"cannot tell the format from the suffix {suffix!r}; use .json or "
                             ".parquet, or pass format='json' or 'parquet'", where=str(path))
    if format not in _FORMATS:
        raise InputError(f"The 'format' parameter of write_predictions must be one of "
                         f"{_FORMATS}. Got {format!r} instead.", where="format")
    return format


def _header(split, model) -> dict:
    from ._validate import _network_name, _split_name
    if not isinstance(model, dict):
        raise InputError(f"expected a dict with name, authors, description and "
                         f"training_data_only, got {type(model).__name__}", where="model")
    problems = schema_problems(model_validator(), model)
    if problems:
        p = problems[0]
        raise InputError(p.message + (f" (and {len(problems) - 1} more)" if len(problems) > 1 else ""),
                         where=f"model{p.where if p.where != '/' else ''}")
    return {"format": FORMAT_NAME, "format_version": FORMAT_VERSION, "model": dict(model),
            "split": {"network": _network_name(split), "split": _split_name(split),
                      "split_hash": split.split_hash}}


def _arrays(split, **given) -> dict:
    n_s = len(split.sample_id)
    width = {"pg_mw": len(split.gen_id), "qg_mvar": len(split.gen_id),
             "vm_pu": len(split.bus_id), "va_deg": len(split.bus_id)}
    arrays = {}
    for name, value in given.items():
        if value is None:
            if name in ("pg_mw", "vm_pu"):
                raise InputError("is required", where=name)
            arrays[name] = None
            continue
        try:
            a = np.asarray(value, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise InputError(f"expected numbers, shape ({n_s}, {width[name]}): {exc}", where=name) from None
        if a.shape != (n_s, width[name]):
            raise InputError(f"has shape {a.shape}; expected ({n_s}, {width[name]}): one row per "
                             f"sample of the split, one column per "
                             f"{'generator' if name in ('pg_mw', 'qg_mvar') else 'bus'}", where=name)
        arrays[name] = round_sig_array(a)
    return arrays


def _inference_ms(value, n_s: int) -> np.ndarray:
    if value is None:
        return np.full(n_s, np.nan)
    try:
        ms = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"expected numbers, shape ({n_s},): {exc}", where="inference_ms") from None
    if ms.shape != (n_s,):
        raise InputError(f"has shape {ms.shape}; expected ({n_s},)", where="inference_ms")
    if np.isinf(ms).any() or (ms < 0).any():
        raise InputError("must be finite and non-negative (NaN: not reported)", where="inference_ms")
    return np.where(np.isnan(ms), np.nan, round_sig_array(np.nan_to_num(ms)))


def _json_bytes(header: dict, ids: np.ndarray, arrays: dict, ms: np.ndarray) -> bytes:
    """Canonical JSON (sorted keys, 10 significant digits), one sample per line.

    The arrays are already rounded (``round_sig_array``), so the standard encoder's shortest
    float text is what ``canonical_json`` would write; it is used for speed."""
    given = {k: v.tolist() for k, v in arrays.items() if v is not None}
    ids_l, ms_l = ids.tolist(), ms.tolist()
    dumps = json.JSONEncoder(sort_keys=True, separators=(",", ":"), allow_nan=False).encode
    lines = []
    for k, sid in enumerate(ids_l):
        sample = {name: rows[k] for name, rows in given.items()}
        sample["sample_id"] = sid
        if ms_l[k] == ms_l[k]:  # not NaN
            sample["inference_ms"] = ms_l[k]
        lines.append(dumps(sample))
    return (b'{"format":' + canonical_json(header["format"]) + b',"format_version":'
            + canonical_json(header["format_version"]) + b',"model":' + canonical_json(header["model"])
            + b',"samples":[\n' + ",\n".join(lines).encode("utf-8") + b'\n],"split":'
            + canonical_json(header["split"]) + b"}\n")
