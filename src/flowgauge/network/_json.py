"""The flowgauge network JSON format (documented in docs/formats.md, schema in
schema/network.schema.json): one object with ``buses``, ``loads``, ``generators`` and
``branches`` as lists of objects whose field names carry their units."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from .._io import atomic_write_bytes, canonical_json
from ..errors import InputError
from ._model import BUS_PQ, BUS_PV, BUS_REF, Network

__all__ = ["network_to_dict", "network_from_dict", "read_network_json", "write_network_json",
           "FORMAT_NAME", "FORMAT_VERSION"]

FORMAT_NAME = "flowgauge-network"
FORMAT_VERSION = 1
_TYPE_TO_NAME = {BUS_PQ: "PQ", BUS_PV: "PV", BUS_REF: "reference"}
_NAME_TO_TYPE = {v: k for k, v in _TYPE_TO_NAME.items()}

# (json field, Network attribute, kind)
_BUS = [("id", "bus_id", "int"), ("type", "bus_type", "bustype"), ("vmin_pu", "vmin_pu", "float"),
        ("vmax_pu", "vmax_pu", "float"), ("base_kv", "base_kv", "float"), ("gs_mw", "gs_mw", "float"),
        ("bs_mvar", "bs_mvar", "float"), ("vm_pu", "vm_pu", "float"), ("va_deg", "va_deg", "float")]
_LOAD = [("id", "load_id", "int"), ("bus", "load_bus", "int"), ("pd_mw", "pd_mw", "float"),
         ("qd_mvar", "qd_mvar", "float")]
_GEN = [("id", "gen_id", "int"), ("bus", "gen_bus", "int"), ("pmin_mw", "pmin_mw", "float"),
        ("pmax_mw", "pmax_mw", "float"), ("qmin_mvar", "qmin_mvar", "float"),
        ("qmax_mvar", "qmax_mvar", "float"), ("vg_pu", "vg_pu", "float"), ("pg_mw", "pg_mw", "float"),
        ("qg_mvar", "qg_mvar", "float"), ("cost_c2_per_mw2h", "cost_c2", "optfloat"),
        ("cost_c1_per_mwh", "cost_c1", "optfloat"), ("cost_c0_per_h", "cost_c0", "optfloat")]
_BRANCH = [("id", "branch_id", "int"), ("from_bus", "from_bus", "int"), ("to_bus", "to_bus", "int"),
           ("r_pu", "r_pu", "float"), ("x_pu", "x_pu", "float"), ("b_pu", "b_pu", "float"),
           ("rate_mva", "rate_mva", "optfloat"), ("tap", "tap", "float"), ("shift_deg", "shift_deg", "float"),
           ("angmin_deg", "angmin_deg", "float"), ("angmax_deg", "angmax_deg", "float"),
           ("in_service", "in_service", "bool")]
_TABLES = [("buses", _BUS), ("loads", _LOAD), ("generators", _GEN), ("branches", _BRANCH)]


def network_to_dict(net: Network) -> dict[str, Any]:
    out: dict[str, Any] = {"format": FORMAT_NAME, "format_version": FORMAT_VERSION, "name": net.name,
                           "base_mva": float(net.base_mva), "provenance": net.provenance}
    for table, spec in _TABLES:
        cols = [(key, getattr(net, attr), kind) for key, attr, kind in spec]
        n = len(cols[0][1])
        rows = []
        for i in range(n):
            row: dict[str, Any] = {}
            for key, arr, kind in cols:
                v = arr[i]
                if kind == "int":
                    row[key] = int(v)
                elif kind == "bustype":
                    row[key] = _TYPE_TO_NAME[int(v)]
                elif kind == "bool":
                    row[key] = bool(v)
                elif kind == "optfloat":
                    row[key] = None if not np.isfinite(v) else float(v)
                else:
                    row[key] = float(v)
            rows.append(row)
        out[table] = rows
    return out


def _column(rows: list, key: str, kind: str, table: str, source: str) -> np.ndarray:
    vals = []
    for i, row in enumerate(rows):
        where = f"{source}: /{table}/{i}/{key}"
        if not isinstance(row, dict):
            raise InputError(f"expected an object, got {type(row).__name__}", where=f"{source}: /{table}/{i}")
        if key not in row:
            if kind == "optfloat":
                vals.append(np.nan)
                continue
            raise InputError("missing field", where=where)
        v = row[key]
        if kind == "int":
            if isinstance(v, bool) or not isinstance(v, int):
                raise InputError(f"expected an integer id, got {v!r}", where=where)
        elif kind == "bustype":
            if v not in _NAME_TO_TYPE:
                raise InputError(f"expected one of 'PQ', 'PV', 'reference', got {v!r}", where=where)
            v = _NAME_TO_TYPE[v]
        elif kind == "bool":
            if not isinstance(v, bool):
                raise InputError(f"expected true or false, got {v!r}", where=where)
        elif kind == "optfloat" and v is None:
            v = np.nan
        elif isinstance(v, bool) or not isinstance(v, (int, float)):
            raise InputError(f"expected a number, got {v!r}", where=where)
        vals.append(v)
    dtype = {"int": np.int64, "bustype": np.int64, "bool": bool}.get(kind, np.float64)
    return np.asarray(vals, dtype=dtype).reshape(len(rows))


def network_from_dict(data: Any, *, source: str = "<network>", check: bool = True) -> Network:
    """Build a :class:`Network` from the JSON object; raises :class:`InputError` naming the field."""
    if not isinstance(data, dict):
        raise InputError("expected a JSON object at the top level", where=source)
    if data.get("format") != FORMAT_NAME:
        raise InputError(f"expected \"format\": \"{FORMAT_NAME}\", got {data.get('format')!r}", where=f"{source}: /format")
    if data.get("format_version") != FORMAT_VERSION:
        raise InputError(f"unsupported format_version {data.get('format_version')!r} (this flowgauge reads {FORMAT_VERSION})",
                         where=f"{source}: /format_version")
    kwargs: dict[str, Any] = {}
    for table, spec in _TABLES:
        rows = data.get(table)
        if not isinstance(rows, list):
            raise InputError("expected a list of objects", where=f"{source}: /{table}")
        for key, attr, kind in spec:
            kwargs[attr] = _column(rows, key, kind, table, source)
    base = data.get("base_mva")
    if isinstance(base, bool) or not isinstance(base, (int, float)) or not base > 0:
        raise InputError(f"expected a positive number, got {base!r}", where=f"{source}: /base_mva")
    name = data.get("name")
    if not isinstance(name, str) or not name:
        raise InputError("expected a non-empty string", where=f"{source}: /name")
    net = Network(name=name, base_mva=float(base), provenance=dict(data.get("provenance") or {}), **kwargs)
    if check:
        from ._checks import check_network
        check_network(net, source=source)
    return net


def read_network_json(path: str | Path) -> Network:
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("no such file", where=str(path)) from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"not valid JSON ({exc})", where=str(path)) from None
    return network_from_dict(data, source=str(path))


def write_network_json(net: Network, path: str | Path) -> None:
    atomic_write_bytes(path, canonical_json(network_to_dict(net), indent=1))
