"""Canonical JSON, content hashes and atomic writes shared by every file format.

Canonical JSON: sorted keys, no spaces, UTF-8, floats rounded to a fixed number of
significant digits, non-finite floats rejected. Hashes are SHA-256 over canonical
content, never over Parquet bytes (their metadata varies with the library version).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "canonical_json",
    "sha256_hex",
    "hash_arrays",
    "atomic_write_bytes",
    "atomic_write_text",
    "round_sig",
    "read_input_bytes",
]

DEFAULT_DIGITS = 10
_UMASK = os.umask(0)
os.umask(_UMASK)


def round_sig(x: float, digits: int = DEFAULT_DIGITS) -> float:
    """Round ``x`` to ``digits`` significant digits (0.0 stays 0.0, -0.0 becomes 0.0)."""
    if x == 0.0:
        return 0.0
    if not math.isfinite(x):
        raise ValueError(f"non-finite number {x!r} cannot be written as canonical JSON")
    return float(f"{x:.{digits - 1}e}")


def _canon(obj: Any, digits: int) -> Any:
    if isinstance(obj, dict):
        return {str(k): _canon(v, digits) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_canon(v, digits) for v in obj]
    if isinstance(obj, np.ndarray):
        return [_canon(v, digits) for v in obj.tolist()]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return round_sig(float(obj), digits)
    if obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, Path):
        return obj.as_posix()
    raise TypeError(f"cannot write {type(obj).__name__} as canonical JSON")


def canonical_json(obj: Any, *, digits: int = DEFAULT_DIGITS, indent: int | None = None) -> bytes:
    """Serialise ``obj`` canonically; same content gives the same bytes.

    ``indent`` only changes whitespace (for files people read); hashes use ``indent=None``.
    """
    text = json.dumps(
        _canon(obj, digits),
        sort_keys=True,
        ensure_ascii=False,
        allow_nan=False,
        indent=indent,
        separators=(",", ":") if indent is None else (",", ": "),
    )
    if indent is not None:
        text += "\n"
    return text.encode("utf-8")


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def hash_arrays(columns: dict[str, np.ndarray]) -> str:
    """SHA-256 over named arrays, independent of the file format that stored them.

    Each column contributes its name, dtype kind, shape and little-endian bytes (float64,
    int64, or UTF-8 for strings), in sorted name order.
    """
    h = hashlib.sha256()
    for name in sorted(columns):
        a = np.asarray(columns[name])
        if a.dtype.kind in "US" or a.dtype == object:
            payload = "\x1f".join(str(v) for v in a.ravel().tolist()).encode("utf-8")
            kind = "str"
        elif a.dtype.kind == "b":
            payload = a.astype("<u1").tobytes()
            kind = "bool"
        elif a.dtype.kind in "iu":
            payload = a.astype("<i8").tobytes()
            kind = "int"
        else:
            payload = np.ascontiguousarray(a, dtype="<f8").tobytes()
            kind = "float"
        h.update(f"{name}|{kind}|{a.shape}|".encode("utf-8"))
        h.update(payload)
    return h.hexdigest()


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``path`` via a temporary file in the same folder and ``os.replace``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.chmod(tmp, 0o666 & ~_UMASK)
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def read_input_bytes(path: str | os.PathLike, *, expected: str = "a file",
                     max_bytes: int | None = None) -> bytes:
    """Read a file the user named; every failure is an :class:`InputError` naming the path.

    ``expected`` says what the file should be ("a network file"); ``max_bytes`` caps the size.
    """
    from .errors import InputError

    path = Path(path)
    try:
        if path.is_dir():
            raise InputError(f"is a folder; expected {expected}", where=str(path))
        if max_bytes is not None and path.stat().st_size > max_bytes:
            raise InputError(f"the file has {path.stat().st_size:,} bytes, over the limit of {max_bytes:,} "
                             "bytes (raise it with --max-bytes, or max_bytes= in Python)", where=str(path))
        with open(path, "rb") as f:
            data = f.read()  # f.read(n) would allocate n bytes up front
    except FileNotFoundError:
        raise InputError("no such file", where=str(path)) from None
    except PermissionError:
        raise InputError("cannot read the file (permission denied)", where=str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc.strerror})", where=str(path)) from None
    if max_bytes is not None and len(data) > max_bytes:  # the file grew after stat()
        raise InputError(f"the file has more than {max_bytes:,} bytes, the limit", where=str(path))
    return data


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))
