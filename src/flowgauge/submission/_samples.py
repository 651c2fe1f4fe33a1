"""Checking the samples of a JSON predictions file with numpy instead of per-item jsonschema.

Every rule of the schema's ``$defs/sample`` is enforced here: a sample is an object with
only the known keys, ``sample_id`` a non-negative integer, ``pg_mw`` and ``vm_pu`` required
arrays of numbers, ``va_deg`` and ``qg_mvar`` optional (for every sample or for none),
``inference_ms`` an optional non-negative number. Lengths must agree between samples; their
agreement with the split is checked by validation. ``vm_pu > 0`` is a value check there too.
"""

from __future__ import annotations

import math
import sys
from itertools import chain
from operator import itemgetter

import numpy as np

from ._format import ARRAY_FIELDS, OPTIONAL_FIELDS, REQUIRED_FIELDS, SAMPLE_KEYS, Problems

__all__ = ["check_samples", "json_type", "stack_rows"]

_NUMBER = {int, float}
_ABSENT = object()
_INT64_MAX = 2**63 - 1
_FLOAT_MAX = sys.float_info.max


def _digits(v: int) -> str:
    """A huge integer as quoted in a message: its first digits and how many there are."""
    sign = "-" if v < 0 else ""
    try:
        text = str(abs(v))
    except ValueError:  # Python refuses to print integers of more than 4,300 digits
        return f"{sign}(more than 4,300 digits)"
    return f"{sign}{text[:12]}... ({len(text):,} digits)" if len(text) > 30 else f"{sign}{text}"


def json_type(value) -> str:
    """How a parsed JSON value is called in messages."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        short = value if len(value) <= 20 else value[:17] + "..."
        return f"the string {short!r}"
    if isinstance(value, dict):
        return "an object"
    if isinstance(value, list):
        return "an array"
    return repr(value)


def check_samples(samples: list, problems: Problems):
    """``(sample_id (S,) int64, {field: (S, width) float64 or None}, inference_ms (S,))``,
    in file order, or ``None`` when a problem was recorded."""
    bad = [i for i, s in enumerate(samples) if type(s) is not dict] if set(map(type, samples)) != {dict} else []
    for i in bad:
        problems.add(f"/samples/{i}", f"expected an object (one sample), got {json_type(samples[i])}")
    if bad or not _check_keys(samples, problems):
        return None
    sample_id = _sample_ids(list(map(itemgetter("sample_id"), samples)), problems)
    arrays = {}
    for field in ARRAY_FIELDS:
        if field in samples[0]:
            rows = list(map(itemgetter(field), samples))
            arrays[field] = stack_rows(rows, field, problems, _json_where(field))
        else:
            arrays[field] = None
    inference_ms = _inference_ms(samples, problems)
    if problems:
        return None
    return sample_id, arrays, inference_ms


def _json_where(field: str):
    def where(row: int, item: int | None = None) -> str:
        return f"/samples/{row}/{field}" + ("" if item is None else f"/{item}")
    return where


def _check_keys(samples: list, problems: Problems) -> bool:
    keysets = list(map(frozenset, samples))
    distinct = set(keysets)
    allowed = frozenset(SAMPLE_KEYS)
    required = frozenset(("sample_id", *REQUIRED_FIELDS))
    ok = True
    if any(ks - allowed or required - ks for ks in distinct):
        ok = False
        for i, ks in enumerate(keysets):
            for key in sorted(ks - allowed):
                problems.add(f"/samples/{i}/{key}",
                             f"unknown field {key!r}; a sample has {', '.join(SAMPLE_KEYS)}")
            for key in sorted(required - ks):
                problems.add(f"/samples/{i}", f"missing required field {key!r}")
    for field in OPTIONAL_FIELDS:
        has = np.fromiter((field in ks for ks in keysets), dtype=bool, count=len(keysets))
        n_has = int(has.sum())
        if 0 < n_has < len(has):
            ok = False
            given = n_has * 2 >= len(has)  # the majority decides which samples are at fault
            for i in np.flatnonzero(has != given):
                msg = (f"{field} is missing here but given for {n_has} other samples"
                       if given else f"{field} is given here but missing from "
                       f"{len(has) - n_has} other samples")
                problems.add(f"/samples/{i}" + ("" if given else f"/{field}"),
                             f"{msg}; give it for every sample or for none")
    return ok


def _sample_ids(ids: list, problems: Problems) -> np.ndarray:
    types = set(map(type, ids))
    if not types <= _NUMBER or (float in types and not all(map(_integral, ids))):
        for i, v in enumerate(ids):
            if type(v) not in _NUMBER or not _integral(v):
                problems.add(f"/samples/{i}/sample_id", f"expected an integer, got {json_type(v)}")
        return np.zeros(len(ids), dtype=np.int64)
    big = [i for i, v in enumerate(ids) if not 0 <= v <= _INT64_MAX] \
        if not 0 <= min(ids) or max(ids) > _INT64_MAX else []
    for i in big:
        problems.add(f"/samples/{i}/sample_id",
                     f"sample id {_digits(ids[i])} is out of range (0 to {_INT64_MAX})")
    if big:
        return np.zeros(len(ids), dtype=np.int64)
    return np.array(ids, dtype=np.int64)


def _integral(v) -> bool:
    return type(v) is int or (type(v) is float and math.isfinite(v) and v.is_integer())


def stack_rows(rows: list, field: str, problems: Problems, where) -> np.ndarray | None:
    """Stack JSON arrays of numbers into shape (len(rows), width) float64.

    ``where(row, item=None)`` names a row or an item. Non-arrays, empty or ragged rows and
    non-numbers are located and recorded; then the whole list is converted at once.
    """
    start = problems.count
    if set(map(type, rows)) != {list}:
        for i, r in enumerate(rows):
            if type(r) is not list:
                problems.add(where(i), f"expected an array of numbers, got {json_type(r)}")
        return None
    lens = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    width = int(np.bincount(lens[lens > 0]).argmax()) if (lens > 0).any() else 0
    for i in np.flatnonzero((lens == 0) | (lens != width)):
        problems.add(where(i), f"has {lens[i]} numbers but the other samples have {width}"
                     if lens[i] else f"is empty; expected an array of {field} numbers")
    if not set(map(type, chain.from_iterable(rows))) <= _NUMBER:
        for i, r in enumerate(rows):
            if not set(map(type, r)) <= _NUMBER:
                for j, v in enumerate(r):
                    if type(v) not in _NUMBER:
                        problems.add(where(i, j), f"expected a number, got {json_type(v)}")
    if problems.count > start:
        return None
    try:
        return np.array(rows, dtype=np.float64) + 0.0  # + 0.0 turns -0.0 into 0.0
    except OverflowError:
        for i, r in enumerate(rows):
            for j, v in enumerate(r):
                if type(v) is int and abs(v) > _FLOAT_MAX:
                    problems.add(where(i, j), f"the integer {_digits(v)} is too large")
        return None


def _inference_ms(samples: list, problems: Problems) -> np.ndarray:
    values = [s.get("inference_ms", _ABSENT) for s in samples]
    if set(map(type, values)) <= {int, float, object} and all(
            v is _ABSENT or 0 <= v <= _FLOAT_MAX for v in values):
        return np.array([math.nan if v is _ABSENT else v for v in values], dtype=np.float64)
    for i, v in enumerate(values):
        if v is _ABSENT:
            continue
        if type(v) not in _NUMBER:
            problems.add(f"/samples/{i}/inference_ms", f"expected a number, got {json_type(v)}")
        elif type(v) is int and v > _FLOAT_MAX:
            problems.add(f"/samples/{i}/inference_ms", f"the integer {_digits(v)} is too large")
        elif not math.isfinite(v):
            problems.add(f"/samples/{i}/inference_ms",
                         f"{v!r} is not allowed; give a finite number of milliseconds or leave it out")
        elif v < 0:
            problems.add(f"/samples/{i}/inference_ms", f"{v!r} ms is negative")
    return np.full(len(values), math.nan)
