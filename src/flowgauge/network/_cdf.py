"""Import of the IEEE Common Data Format (the fixed-column text format for exchanging solved
load-flow data, IEEE Working Group on a Common Format, 1973), with an optional side file of
our own for what the format does not carry (generator costs, branch ratings; documented in
docs/network-format.md).

Layout read here (1-based, inclusive columns), one card per line:

* title card: base MVA in columns 32-37;
* ``BUS DATA FOLLOWS`` ... ``-999``: bus number 1-4, type 25-26, final voltage 28-33 [p.u.],
  final angle 34-40 [deg], load 41-49 [MW] and 50-59 [MVAr], generation 60-67 [MW] and
  68-75 [MVAr], base kV 77-83, desired voltage 85-90 [p.u.], maximum and minimum MVAr (or
  voltage) 91-98 and 99-106, shunt G and B 107-114 and 115-122 [p.u.];
* ``BRANCH DATA FOLLOWS`` ... ``-999``: tap bus 1-4, Z bus 6-9, circuit 17, type 19, R 20-29,
  X 30-40, total line charging B 41-50 [p.u.], rating 51-55 [MVA], final turns ratio 77-82,
  final phase-shift angle 84-90 [deg];
* optional ``LOSS ZONES FOLLOWS`` / ``INTERCHANGE DATA FOLLOWS`` / ``TIE LINES FOLLOWS``
  sections (skipped up to their ``-9...`` terminator) and ``END OF DATA``.
"""

from __future__ import annotations

import json
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .._io import read_input_bytes
from ..errors import InputError
from ._model import BUS_PQ, Network

__all__ = ["read_cdf", "CdfImportWarning", "SIDE_FORMAT_NAME", "DEFAULT_VMIN_PU", "DEFAULT_VMAX_PU",
           "UNLIMITED_Q_MVAR"]

SIDE_FORMAT_NAME = "flowgauge-cdf-side"
# Voltage band and P limits when the file gives none: the defaults of MATPOWER's CDF converter,
# so an imported IEEE case matches the case files shipped with PYPOWER.
DEFAULT_VMIN_PU = 0.94
DEFAULT_VMAX_PU = 1.06
# Reactive limits of a PV or reference bus that gives none (both columns zero) [MVAr].
UNLIMITED_Q_MVAR = 9999.0


class CdfImportWarning(UserWarning):
    """Data the IEEE Common Data Format did not carry was left unset or defaulted."""


# field -> (first column, last column), 1-based inclusive, and a label for messages
_BUS_COLS = {
    "id": (1, 4, "bus number"), "type": (25, 26, "bus type"), "vm": (28, 33, "final voltage"),
    "va": (34, 40, "final angle"), "pd": (41, 49, "load MW"), "qd": (50, 59, "load MVAR"),
    "pg": (60, 67, "generation MW"), "qg": (68, 75, "generation MVAR"), "base_kv": (77, 83, "base kV"),
    "vset": (85, 90, "desired volts"), "qmax": (91, 98, "maximum MVAR or voltage"),
    "qmin": (99, 106, "minimum MVAR or voltage"), "gs": (107, 114, "shunt conductance G"),
    "bs": (115, 122, "shunt susceptance B"),
}
_BRANCH_COLS = {
    "from": (1, 4, "tap bus number"), "to": (6, 9, "Z bus number"), "circuit": (17, 17, "circuit"),
    "type": (19, 19, "branch type"), "r": (20, 29, "resistance R"), "x": (30, 40, "reactance X"),
    "b": (41, 50, "line charging B"), "rate": (51, 55, "MVA rating 1"), "ratio": (77, 82, "final turns ratio"),
    "shift": (84, 90, "final angle"),
}
_INT_FIELDS = {"id", "type", "from", "to", "circuit"}
_OPTIONAL_SECTIONS = ("LOSS ZONES FOLLOWS", "INTERCHANGE DATA FOLLOWS", "TIE LINES FOLLOWS")


@dataclass(frozen=True)
class _Cards:
    """Numbers read from the two data sections: one array per field, shape (n_cards,), plus the
    1-based line number of each card (field ``line``)."""

    base_mva: float
    bus: dict[str, np.ndarray]
    branch: dict[str, np.ndarray]


def _field(line: str, lineno: int, name: str, cols: tuple, path: str) -> float:
    first, last, label = cols
    text = line[first - 1:last].strip()
    if not text:
        return 0.0
    try:
        value = float(text.replace("D", "E").replace("d", "e"))
    except ValueError:
        raise InputError(f"columns {first}-{last} ({label}): expected a number, got {text!r}",
                         where=f"{path}:{lineno}") from None
    if not np.isfinite(value) or (name in _INT_FIELDS and not value.is_integer()):
        kind = "an integer" if name in _INT_FIELDS else "a finite number"
        raise InputError(f"columns {first}-{last} ({label}): expected {kind}, got {text!r}", where=f"{path}:{lineno}")
    return value


def _read_section(lines: list[str], start: int, cols: dict, path: str, what: str) -> tuple[dict, int]:
    """Parse cards from ``lines[start]`` up to the ``-999`` terminator; return the columns and
    the index of the line after the terminator."""
    rows: list[list[float]] = []
    i = start
    while i < len(lines) and not lines[i].startswith("-999"):
        line = lines[i]
        if line.strip():
            rows.append([_field(line, i + 1, name, c, path) for name, c in cols.items()] + [i + 1])
        i += 1
    if i == len(lines):
        raise InputError(f"{what} section has no -999 terminator", where=f"{path}:{start}")
    table = np.asarray(rows, dtype=float).reshape(len(rows), len(cols) + 1)
    names = [*cols, "line"]
    return {name: table[:, k] for k, name in enumerate(names)}, i + 1


def _declared_items(header: str) -> int | None:
    parts = header.split()
    if len(parts) >= 2 and parts[-1].upper() == "ITEMS" and parts[-2].isdigit():
        return int(parts[-2])
    return None


def _find_header(lines: list[str], start: int, header: str, path: str) -> int:
    for i in range(start, len(lines)):
        if lines[i].startswith(header):
            return i
        if lines[i].strip():
            raise InputError(f"expected a line starting with {header!r}, got {lines[i].strip()[:40]!r}",
                             where=f"{path}:{i + 1}")
    raise InputError(f"no line starting with {header!r}", where=path)


def _check_count(lines: list[str], header_at: int, got: int, what: str, path: str) -> None:
    want = _declared_items(lines[header_at])
    if want is not None and want != got:
        warnings.warn(f"{path}:{header_at + 1}: header announces {want} {what} items, the section has {got}",
                      CdfImportWarning, stacklevel=4)


def _skip_optional_sections(lines: list[str], i: int, path: str) -> None:
    while i < len(lines):
        line = lines[i]
        if not line.strip() or line.startswith("END OF DATA"):
            i += 1
            continue
        if not line.startswith(_OPTIONAL_SECTIONS):
            raise InputError(f"expected a section header ({', '.join(_OPTIONAL_SECTIONS)}) or END OF DATA, "
                             f"got {line.strip()[:40]!r}", where=f"{path}:{i + 1}")
        j = i + 1
        while j < len(lines) and not lines[j].startswith("-9"):
            j += 1
        if j == len(lines):
            raise InputError(f"section {line.split(' FOLLOWS')[0]!r} has no -9 terminator", where=f"{path}:{i + 1}")
        i = j + 1


def _parse(path: Path) -> _Cards:
    raw = read_input_bytes(path, expected="a network file")
    try:
        text = raw.decode("ascii", errors="strict")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise InputError("expected plain ASCII text (IEEE Common Data Format)", where=f"{path}:{line}") from None
    src = str(path)
    lines = [ln.rstrip("\r\n").ljust(127) for ln in text.splitlines()]
    if not lines:
        raise InputError("empty file (expected the IEEE Common Data Format title card)", where=src)
    base_text = lines[0][31:37].strip()
    try:
        base_mva = float(base_text)
    except ValueError:
        raise InputError(f"title card columns 32-37 (MVA base): expected a number, got {base_text!r}; "
                         f"is this an IEEE Common Data Format file?", where=f"{src}:1") from None
    if not (np.isfinite(base_mva) and base_mva > 0):
        raise InputError(f"title card columns 32-37 (MVA base): expected a positive number, got {base_text!r}",
                         where=f"{src}:1")
    h_bus = _find_header(lines, 1, "BUS DATA FOLLOWS", src)
    bus, after_bus = _read_section(lines, h_bus + 1, _BUS_COLS, src, "BUS DATA")
    _check_count(lines, h_bus, bus["id"].size, "bus", src)
    h_br = _find_header(lines, after_bus, "BRANCH DATA FOLLOWS", src)
    branch, after_br = _read_section(lines, h_br + 1, _BRANCH_COLS, src, "BRANCH DATA")
    _check_count(lines, h_br, branch["from"].size, "branch", src)
    _skip_optional_sections(lines, after_br, src)
    if bus["id"].size == 0:
        raise InputError("BUS DATA section has no buses", where=f"{src}:{h_bus + 1}")
    return _Cards(base_mva=base_mva, bus=bus, branch=branch)


def _bus_types(b: dict, src: str) -> np.ndarray:
    code = b["type"].astype(np.int64)
    bad = ~np.isin(code, (0, 1, 2, 3))
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise InputError(f"columns 25-26 (bus type): expected 0, 1, 2 or 3, got {code[k]}",
                         where=f"{src}:{int(b['line'][k])}")
    return np.where(code == 0, BUS_PQ, code)


def _check_branch_types(br: dict, src: str) -> None:
    bad = ~np.isin(br["type"], (0, 1, 2, 3, 4))
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise InputError(f"column 19 (branch type): expected 0 to 4, got {int(br['type'][k])}",
                         where=f"{src}:{int(br['line'][k])}")


def _check_ratings(br: dict, src: str) -> None:
    # 0 means "no thermal limit" in this format; a negative rating means nothing (as in our JSON format)
    bad = br["rate"] < 0
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise InputError(f"columns 51-55 (MVA rating 1): negative rating {br['rate'][k]:g} (expected > 0, "
                         "or 0 for no thermal limit)", where=f"{src}:{int(br['line'][k])}")


def _build(cards: _Cards, src: str) -> Network:
    b, br, base = cards.bus, cards.branch, cards.base_mva
    btype = _bus_types(b, src)
    _check_branch_types(br, src)
    _check_ratings(br, src)
    # Type 1 buses hold voltage within the limits in columns 91-106, when given.
    vlim = (b["type"] == 1) & (b["qmax"] > 0) & (b["qmin"] > 0) & (b["qmin"] <= b["qmax"])
    is_gen = (btype != BUS_PQ) | (b["pg"] != 0) | (b["qg"] != 0)
    is_load = (b["pd"] != 0) | (b["qd"] != 0)
    gb = np.flatnonzero(is_gen)
    pv = btype[gb] != BUS_PQ
    qmax, qmin, qg = b["qmax"][gb], b["qmin"][gb], b["qg"][gb]
    if np.any(pv & (qmax < qmin)):
        g = int(np.flatnonzero(pv & (qmax < qmin))[0])
        raise InputError(f"columns 91-98 (maximum MVAR) {qmax[g]:g} is below columns 99-106 "
                         f"(minimum MVAR) {qmin[g]:g}", where=f"{src}:{int(b['line'][gb[g]])}")
    no_q = pv & (qmax == 0) & (qmin == 0)
    qmax = np.where(pv, np.where(no_q, UNLIMITED_Q_MVAR, qmax), qg)
    qmin = np.where(pv, np.where(no_q, -UNLIMITED_Q_MVAR, qmin), qg)
    pg = b["pg"][gb]
    vset = b["vset"][gb]
    n_gen, n_load, n_br = gb.size, int(is_load.sum()), br["from"].size
    ratio = br["ratio"]
    net = Network(
        name=Path(src).stem, base_mva=base,
        bus_id=b["id"].astype(np.int64), bus_type=btype,
        vmin_pu=np.where(vlim, b["qmin"], DEFAULT_VMIN_PU), vmax_pu=np.where(vlim, b["qmax"], DEFAULT_VMAX_PU),
        base_kv=b["base_kv"], gs_mw=b["gs"] * base, bs_mvar=b["bs"] * base, vm_pu=b["vm"], va_deg=b["va"],
        load_id=np.arange(1, n_load + 1, dtype=np.int64), load_bus=b["id"][is_load].astype(np.int64),
        pd_mw=b["pd"][is_load], qd_mvar=b["qd"][is_load],
        gen_id=np.arange(1, n_gen + 1, dtype=np.int64), gen_bus=b["id"][gb].astype(np.int64),
        pmin_mw=np.minimum(pg, 0.0), pmax_mw=np.maximum(pg, 0.0) + base, qmin_mvar=qmin, qmax_mvar=qmax,
        vg_pu=np.where(vset > 0, vset, b["vm"][gb]), pg_mw=pg, qg_mvar=qg,
        cost_c2=np.full(n_gen, np.nan), cost_c1=np.full(n_gen, np.nan), cost_c0=np.full(n_gen, np.nan),
        branch_id=np.arange(1, n_br + 1, dtype=np.int64), from_bus=br["from"].astype(np.int64),
        to_bus=br["to"].astype(np.int64), r_pu=br["r"], x_pu=br["x"], b_pu=br["b"],
        rate_mva=np.where(br["rate"] > 0, br["rate"], np.nan), tap=np.where(ratio != 0, ratio, 1.0),
        shift_deg=br["shift"], angmin_deg=np.full(n_br, -360.0), angmax_deg=np.full(n_br, 360.0),
        in_service=np.ones(n_br, bool),
        provenance={"source": f"IEEE Common Data Format file {Path(src).name}", "imported_by": "flowgauge read_cdf"},
    )
    if no_q.any():
        warnings.warn(f"{src}: no reactive limits given for the generators at buses "
                      f"{_id_list(b['id'][gb][no_q])}; set to +/-{UNLIMITED_Q_MVAR:g} MVAr",
                      CdfImportWarning, stacklevel=3)
    controlled = br["type"] >= 2
    if controlled.any():
        warnings.warn(f"{src}: {int(controlled.sum())} branch(es) of type 2-4 (tap or phase-shift control); "
                      f"their final turns ratio and angle are kept fixed", CdfImportWarning, stacklevel=3)
    return net


def _id_list(ids: np.ndarray, limit: int = 10) -> str:
    ids = [str(int(i)) for i in ids]
    return ", ".join(ids[:limit]) + (f", ... ({len(ids)} in all)" if len(ids) > limit else "")


def read_cdf(path: str | Path, side_file: str | Path | None = None) -> Network:
    """Read a network in the IEEE Common Data Format.

    Buses: types 0 and 1 become PQ, 2 PV, 3 reference; ``vm_pu``/``va_deg`` are the published
    solved values. Voltage limits: those of a type 1 bus when given, else 0.94-1.06 p.u. Loads:
    one per bus with non-zero load. Generators: one per bus of type 2 or 3 or with non-zero
    generation; ``pmin_mw = min(Pg, 0)``, ``pmax_mw = max(Pg, 0) + base MVA`` (the format has no
    P limits); Q limits from columns 91-106 (a generator on a PQ bus holds its published Q);
    voltage setpoint: the desired voltage, or the final voltage when none is given. Branches:
    tap = final turns ratio (0 means 1.0, a line), shift = final angle; all in service.

    Costs and ratings the file lacks come from ``side_file`` (format ``flowgauge-cdf-side``, see
    docs/network-format.md); otherwise they stay unset (NaN) and a :class:`CdfImportWarning`
    names what is missing. Bad input raises :class:`InputError` naming the file and line.
    """
    from ._checks import check_network

    path = Path(path)
    cards = _parse(path)
    net = _build(cards, str(path))
    if side_file is not None:
        net = _apply_side_file(net, cards.branch["circuit"].astype(np.int64), Path(side_file))
    _warn_missing(net, str(path), side_file)
    check_network(net, source=str(path))
    return net


def _warn_missing(net: Network, src: str, side_file: Any) -> None:
    hint = "" if side_file is not None else " (give them in a side file, see docs/network-format.md)"
    if not net.has_costs:
        warnings.warn(f"{src}: the IEEE Common Data Format carries no generator costs; costs left unset{hint}",
                      CdfImportWarning, stacklevel=3)
    no_rate = ~np.isfinite(net.rate_mva)
    if no_rate.any():
        warnings.warn(f"{src}: no MVA rating for {int(no_rate.sum())} of {net.n_branch} branches (ids "
                      f"{_id_list(net.branch_id[no_rate])}); they have no thermal limit{hint}",
                      CdfImportWarning, stacklevel=3)


# ---- side file --------------------------------------------------------------------------
_SIDE_TABLES = {
    # table: (key fields, value fields)
    "generators": (("bus",), ("cost_c2_per_mw2h", "cost_c1_per_mwh", "cost_c0_per_h", "pmin_mw", "pmax_mw")),
    "branches": (("from_bus", "to_bus", "circuit"), ("rate_mva",)),
    "buses": (("id",), ("vmin_pu", "vmax_pu")),
}
_SIDE_NULLABLE = {"rate_mva"}


def _no_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON number (write null for an absent value)")


def _read_side(path: Path) -> dict:
    try:
        data = json.loads(path.read_text(encoding="utf-8"), parse_constant=_no_constant)
    except FileNotFoundError:
        raise InputError("no such side file", where=str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read the side file ({exc.strerror})", where=str(path)) from None
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON: {exc.msg}", where=f"{path}:{exc.lineno}:{exc.colno}") from None
    except (UnicodeDecodeError, ValueError) as exc:
        raise InputError(f"not valid JSON: {exc}", where=str(path)) from None
    if not isinstance(data, dict):
        raise InputError("expected a JSON object at the top level", where=f"{path}: /")
    if data.get("format") != SIDE_FORMAT_NAME:
        raise InputError(f"expected \"format\": \"{SIDE_FORMAT_NAME}\", got {data.get('format')!r}",
                         where=f"{path}: /format")
    if data.get("format_version") != 1:
        raise InputError(f"unsupported format_version {data.get('format_version')!r} (expected 1)",
                         where=f"{path}: /format_version")
    extra = sorted(set(data) - {"format", "format_version", "description", *_SIDE_TABLES})
    if extra:
        raise InputError(f"unknown field(s) {', '.join(map(repr, extra))} (expected {', '.join(_SIDE_TABLES)})",
                         where=f"{path}: /")
    return data


def _side_rows(data: dict, table: str, path: Path) -> list[tuple[str, tuple, dict]]:
    """Validated entries of one side-file table: (JSON pointer, key, values)."""
    keys, values = _SIDE_TABLES[table]
    rows = data.get(table, [])
    if not isinstance(rows, list):
        raise InputError("expected a list of objects", where=f"{path}: /{table}")
    out, seen = [], {}
    for i, row in enumerate(rows):
        ptr = f"/{table}/{i}"
        if not isinstance(row, dict):
            raise InputError("expected an object", where=f"{path}: {ptr}")
        extra = sorted(set(row) - set(keys) - set(values))
        if extra:
            raise InputError(f"unknown field(s) {', '.join(map(repr, extra))} (expected {', '.join(keys + values)})",
                             where=f"{path}: {ptr}")
        key = tuple(row.get(k, 1 if k == "circuit" else None) for k in keys)
        for k, v in zip(keys, key):
            if isinstance(v, bool) or not isinstance(v, int):
                raise InputError(f"expected an integer, got {json.dumps(v)}", where=f"{path}: {ptr}/{k}")
        for k in values:
            v = row.get(k, 0)
            if v is None and k in _SIDE_NULLABLE:
                continue
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise InputError(f"expected a number, got {json.dumps(v)}", where=f"{path}: {ptr}/{k}")
        if key in seen:
            raise InputError(f"duplicate entry (same as {seen[key]})", where=f"{path}: {ptr}")
        seen[key] = ptr
        out.append((ptr, key, {k: row[k] for k in values if k in row}))
    return out


def _lookup(index: dict, key: tuple, where: str, what: str) -> int:
    if key not in index:
        raise InputError(f"no {what} in the network matches {key if len(key) > 1 else key[0]}", where=where)
    k = index[key]
    if k < 0:
        raise InputError(f"{what} {key} is ambiguous: the network has several", where=where)
    return k


def _position_index(keys: list[tuple]) -> dict:
    index: dict = {}
    for k, key in enumerate(keys):
        index[key] = -1 if key in index else k
    return index


def _apply_side_file(net: Network, circuit: np.ndarray, path: Path) -> Network:
    """Costs, P limits, branch ratings and voltage limits from the side file (see module doc)."""
    data = _read_side(path)
    gen = {f: getattr(net, a).copy() for f, a in (("cost_c2_per_mw2h", "cost_c2"), ("cost_c1_per_mwh", "cost_c1"),
                                                  ("cost_c0_per_h", "cost_c0"), ("pmin_mw", "pmin_mw"),
                                                  ("pmax_mw", "pmax_mw"))}
    gen_index = _position_index([(int(b),) for b in net.gen_bus])
    costed = np.zeros(net.n_gen, bool)
    for ptr, key, vals in _side_rows(data, "generators", path):
        g = _lookup(gen_index, key, f"{path}: {ptr}/bus", "generator at bus")
        if any(k.startswith("cost_") for k in vals):
            costed[g] = True
            for k in ("cost_c2_per_mw2h", "cost_c1_per_mwh", "cost_c0_per_h"):
                gen[k][g] = float(vals.get(k, 0.0))
        for k in ("pmin_mw", "pmax_mw"):
            if k in vals:
                gen[k][g] = float(vals[k])
    if costed.any() and not costed.all():
        raise InputError(f"costs given for some generators but not for those at buses "
                         f"{_id_list(net.gen_bus[~costed])} (give costs for every generator, or none)",
                         where=f"{path}: /generators")
    rate = net.rate_mva.copy()
    br_index = _position_index([(int(f), int(t), int(c)) for f, t, c in zip(net.from_bus, net.to_bus, circuit)])
    for ptr, key, vals in _side_rows(data, "branches", path):
        k = _lookup(br_index, key, f"{path}: {ptr}", "branch (from_bus, to_bus, circuit)")
        v = vals.get("rate_mva")
        rate[k] = np.nan if v is None or v == 0 else float(v)
    vmin, vmax = net.vmin_pu.copy(), net.vmax_pu.copy()
    bus_index = _position_index([(int(b),) for b in net.bus_id])
    for ptr, key, vals in _side_rows(data, "buses", path):
        k = _lookup(bus_index, key, f"{path}: {ptr}/id", "bus")
        vmin[k] = float(vals.get("vmin_pu", vmin[k]))
        vmax[k] = float(vals.get("vmax_pu", vmax[k]))
    prov = dict(net.provenance, side_file=path.name)
    return net.replace(cost_c2=gen["cost_c2_per_mw2h"], cost_c1=gen["cost_c1_per_mwh"], cost_c0=gen["cost_c0_per_h"],
                       pmin_mw=gen["pmin_mw"], pmax_mw=gen["pmax_mw"], rate_mva=rate, vmin_pu=vmin, vmax_pu=vmax,
                       provenance=prov)
