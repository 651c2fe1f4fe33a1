"""Canonical JSON, content hashes and atomic writes shared by every file format.

Canonical JSON: sorted keys, no spaces, UTF-8, floats rounded to a fixed number of
significant digits, non-finite floats rejected. Hashes are SHA-256 over canonical
content, never over Parquet bytes (their metadata varies with the library version).
"""

from __future__ import annotations

import gc
import hashlib
import json
import math
import os
import re
import stat
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
    "parse_json",
    "clip_text",
    "safe_text",
    "echo_value",
    "ECHO_CHARS",
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


READ_CHUNK = 1 << 20


def read_input_bytes(path: str | os.PathLike, *, expected: str = "a file",
                     max_bytes: int | None = None) -> bytes:
    """Read a file the user named; every failure is an :class:`InputError` naming the path.

    ``expected`` says what the file should be ("a network file"); ``max_bytes`` caps the size.
    Only regular files are read: a device (``/dev/zero``) or a FIFO reports a size of 0 and
    could be read forever or block forever, so the file type is checked before opening, the
    file is opened without blocking, and reading stops at ``max_bytes + 1`` bytes whatever
    the file claims to hold.
    """
    from .errors import InputError

    path = Path(path)
    where = str(path)
    try:
        st = os.stat(path)
        _require_regular(st.st_mode, expected, where)
        if max_bytes is not None and st.st_size > max_bytes:
            raise InputError(f"the file has {st.st_size:,} bytes, over the limit of {max_bytes:,} "
                             "bytes (raise it with --max-bytes, or max_bytes= in Python)", where=where)
        # O_NONBLOCK: should the path have become a FIFO since stat(), open() must not wait for a writer
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
        with os.fdopen(fd, "rb", buffering=0) as f:
            _require_regular(os.fstat(f.fileno()).st_mode, expected, where)
            data = _read_capped(f, st.st_size, max_bytes)
    except FileNotFoundError:
        raise InputError("no such file", where=where) from None
    except PermissionError:
        raise InputError("cannot read the file (permission denied)", where=where) from None
    except IsADirectoryError:
        raise InputError(f"is a folder; expected {expected}", where=where) from None
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc.strerror or exc})", where=where) from None
    if max_bytes is not None and len(data) > max_bytes:  # the file grew after stat()
        raise InputError(f"the file has more than {max_bytes:,} bytes, the limit", where=where)
    return data


def _require_regular(mode: int, expected: str, where: str) -> None:
    from .errors import InputError

    if stat.S_ISDIR(mode):
        raise InputError(f"is a folder; expected {expected}", where=where)
    if not stat.S_ISREG(mode):
        kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode)
                or stat.S_ISBLK(mode) else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
        raise InputError(f"is {kind}, not a regular file; expected {expected}", where=where)


def _read_capped(f, size: int, max_bytes: int | None) -> bytes:
    """Read to the end, but never more than ``max_bytes + 1`` bytes. The first read asks for
    the size stat() gave plus one (f.read(n) allocates n bytes up front, so never the cap
    itself); a file that grew meanwhile is read on in chunks up to the cap."""
    cap = None if max_bytes is None else max_bytes + 1
    first = size + 1 if cap is None else min(size + 1, cap)
    data = f.read(first) or b""
    if len(data) < first:
        return data
    parts, total = [data], len(data)
    while cap is None or total < cap:
        chunk = f.read(READ_CHUNK if cap is None else min(READ_CHUNK, cap - total))
        if not chunk:
            break
        parts.append(chunk)
        total += len(chunk)
    return b"".join(parts)


# What an error message may quote of a submitter's text; longer text is cut with an ellipsis
# and its full length.
ECHO_CHARS = 200
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f\ud800-\udfff\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def clip_text(text: str, limit: int = ECHO_CHARS) -> str:
    """``text`` cut to ``limit`` characters, with "... (N characters)" when longer."""
    if len(text) <= limit:
        return text
    return f"{text[:limit]}... ({len(text):,} characters)"


def safe_text(text: str) -> str:
    """``text`` with control characters (other than tab and newline), lone surrogates and
    bidirectional overrides written as ``\\xNN`` / ``\\uNNNN`` escapes: safe to print on a
    terminal and to encode as UTF-8."""
    return _CONTROL.sub(lambda m: m.group().encode("unicode_escape").decode("ascii"), text)


def echo_value(value: Any, limit: int = ECHO_CHARS) -> str:
    """A submitter's value as quoted in a message: ``repr`` for strings (escapes shown),
    cut to ``limit`` characters."""
    text = repr(value) if isinstance(value, str) else str(value)
    return clip_text(safe_text(text), limit)


class _DuplicateKey(ValueError):
    def __init__(self, key: str, pos: int | None = None):
        super().__init__(key)
        self.key, self.pos = key, pos


def _no_duplicates(pairs: list) -> dict:
    out = dict(pairs)
    if len(out) != len(pairs):
        seen = set()
        for k, _ in pairs:
            if k in seen:
                raise _DuplicateKey(k)
            seen.add(k)
    return out


def _locate_duplicate(text: str, parse_constant) -> tuple[str, int] | None:
    """Parse again with the pure-Python scanner, which tells where each object starts."""
    from json import decoder, scanner

    found: list = []

    def parse_object(s_and_end, strict, scan_once, object_hook, object_pairs_hook, memo=None,
                     _w=decoder.WHITESPACE.match, _ws=decoder.WHITESPACE_STR):
        start = s_and_end[1] - 1

        def hook(pairs):
            try:
                return _no_duplicates(pairs)
            except _DuplicateKey as exc:
                found.append((exc.key, start))
                raise
        return decoder.JSONObject(s_and_end, strict, scan_once, object_hook, hook, memo, _w, _ws)

    dec = json.JSONDecoder(object_pairs_hook=_no_duplicates, parse_constant=parse_constant)
    dec.parse_object = parse_object
    dec.scan_once = scanner.py_make_scanner(dec)
    try:
        dec.decode(text)
    except (_DuplicateKey, ValueError, RecursionError):
        pass
    return found[0] if found else None


_SURROGATE_ESCAPE = re.compile(r"\\u[dD][89a-fA-F]")
_HAS_SURROGATE = re.compile("[\ud800-\udfff]")


def _surrogate_pointer(doc: Any) -> str | None:
    """JSON pointer of the first key or string holding a lone surrogate, or None."""
    stack = [((), doc)]
    while stack:
        path, node = stack.pop()
        if isinstance(node, str):
            if _HAS_SURROGATE.search(node):
                return _pointer(path)
        elif isinstance(node, dict):
            for k, v in node.items():
                if _HAS_SURROGATE.search(k):
                    return _pointer((*path, k))
                stack.append(((*path, k), v))
        elif isinstance(node, list):
            stack.extend(((*path, i), v) for i, v in enumerate(node) if isinstance(v, (str, list, dict)))
    return None


def _pointer(path: tuple) -> str:
    return "/" + "/".join(safe_text(str(p)).replace("~", "~0").replace("/", "~1") for p in path)


def parse_json(text: str, *, where: str, parse_constant=None) -> Any:
    """``json.loads`` for files from users: a key given twice in one object and nesting too
    deep for the parser are :class:`InputError` naming the key and its line and column.
    Syntax errors stay :class:`json.JSONDecodeError` (callers word them for their format)."""
    from .errors import InputError

    was_enabled = gc.isenabled()
    gc.disable()  # millions of acyclic lists: collections triggered by them only rescan them
    try:
        doc = json.loads(text, object_pairs_hook=_no_duplicates, parse_constant=parse_constant)
        if _SURROGATE_ESCAPE.search(text):  # only an escape can put a lone surrogate in a str
            pointer = _surrogate_pointer(doc)
            if pointer is not None:
                raise InputError("the text holds a lone surrogate (an escape \\ud800 to \\udfff "
                                 "outside a pair): not valid Unicode", where=f"{where}: {pointer}")
        return doc
    except _DuplicateKey as exc:
        located = _locate_duplicate(text, parse_constant)
        at = ""
        if located is not None:
            pos = located[1]
            line = text.count("\n", 0, pos) + 1
            col = pos - (text.rfind("\n", 0, pos) + 1) + 1
            at = f" in the object starting at line {line} column {col}"
        raise InputError(f"key {echo_value(exc.key)} is given twice{at}; each key may appear once "
                         "per object", where=where) from None
    except RecursionError:
        raise InputError("not valid JSON: arrays or objects nested too deeply", where=where) from None
    except (json.JSONDecodeError, InputError):
        raise
    except ValueError as exc:  # e.g. an integer of more than 4,300 digits
        raise InputError(f"not valid JSON: {clip_text(str(exc))}", where=where) from None
    finally:
        if was_enabled:
            gc.enable()


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))
