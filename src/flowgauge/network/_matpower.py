"""MATPOWER case format (``.m`` files, case format version 2): read a case as a :class:`Network`,
and write one (for round trips and for exchange with other tools).

The reader parses the file as data, never as code: it accepts assignments ``mpc.<field> = ...;``
of numeric matrices (``[ ... ]``), scalars, quoted strings and cell arrays of strings
(``{ ... }``), with ``%`` comments, ``...`` continuations and the optional ``function`` line.
Every other statement is an error naming file and line.

Mapping (docs/network-format.md, "MATPOWER case import"):

- buses: all buses, in file order; type 4 (isolated) is refused. ``Gs``/``Bs`` are MW / MVAr at
  1.0 p.u. voltage, as in our format.
- loads: one per bus with non-zero ``Pd`` or ``Qd``, in bus order.
- generators: the in-service rows (``GEN_STATUS > 0``), in file order; out-of-service rows are
  dropped and counted in the provenance. Infinite reactive limits become +/-9999 MVAr.
- costs: polynomial rows (model 2) of degree at most 2 (higher-degree rows whose extra
  coefficients are all zero are accepted). Piecewise-linear rows (model 1) are refused: a
  quadratic stand-in would move the optimum, so no silent conversion is made. Reactive-power
  cost rows (rows ``ng+1 .. 2 ng``) are accepted only when they are all zero.
- branches: all rows, in file order, with their in-service flag; ``RATE_A = 0`` means no
  thermal limit; ``TAP = 0`` means a line (ratio 1.0); an angle-difference limit of 0, or beyond
  +/-360 degrees, means no limit (as in MATPOWER), stored as -360 / 360; absent columns likewise.
- the solution columns some files carry (bus columns 14-17, generator 22-25, branch 14-21) are
  ignored; ``mpc.bus_name`` is kept in the provenance as ``bus_names``; other fields
  (``gentype``, ``genfuel``, ...) are ignored.
"""

from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .._io import atomic_write_bytes, read_input_bytes
from ..errors import InputError
from ._model import BUS_PQ, BUS_PV, BUS_REF, Network

__all__ = ["read_matpower", "parse_matpower", "write_matpower", "case_text", "MatpowerImportWarning",
           "MatpowerCase"]

UNLIMITED_Q_MVAR = 9999.0
MAX_CASE_BYTES = 200 * 1024 * 1024
# Minimum columns (MATPOWER case format version 2).
_MIN_COLS = {"bus": 13, "gen": 10, "branch": 11, "gencost": 5}


class MatpowerImportWarning(UserWarning):
    """Something in a MATPOWER case was read with a stated assumption."""


@dataclass
class MatpowerCase:
    """The parsed fields of a case file: ``values[name]`` and ``lines[name]`` (the line where the
    assignment starts); numeric matrices as 2-D float arrays with ``row_lines[name]`` giving
    each row's line."""
    path: str
    function: str | None
    values: dict[str, Any]
    lines: dict[str, int]
    row_lines: dict[str, list[int]]

    def where(self, name: str, row: int | None = None) -> str:
        if row is not None and name in self.row_lines and row < len(self.row_lines[name]):
            return f"{self.path}:{self.row_lines[name][row]}"
        return f"{self.path}:{self.lines.get(name, 1)}"


# ---- tokenising -----------------------------------------------------------------------------

_NUMBER = re.compile(r"[+-]?(?:(?:\d+\.?\d*|\.\d+)(?:[eEdD][+-]?\d+)?|[Ii]nf|NaN|nan)")


def _strip_comment(line: str) -> str:
    """The line without its ``%`` comment (a ``%`` inside a quoted string is kept)."""
    out, quote = [], False
    for ch in line:
        if ch == "'":
            quote = not quote
        elif ch == "%" and not quote:
            break
        out.append(ch)
    return "".join(out)


def _statements(text: str, path: str) -> list[tuple[int, str]]:
    """Split into statements ``(first line, text)``; a bracketed value may span lines."""
    stmts: list[tuple[int, str]] = []
    buf: list[str] = []
    start = 0
    depth = 0
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = _strip_comment(raw).rstrip()
        if line.endswith("..."):
            line = line[:-3]
            cont = True
        else:
            cont = False
        if not buf and not line.strip():
            continue
        if not buf:
            start = lineno
        buf.append(line)
        depth += line.count("[") + line.count("{") - line.count("]") - line.count("}")
        if depth < 0:
            raise InputError("a closing bracket without an opening one", where=f"{path}:{lineno}")
        if depth == 0 and not cont:
            stmts.append((start, "\n".join(buf)))
            buf = []
    if buf:
        raise InputError("the file ends inside an unclosed '[' or '{'", where=f"{path}:{start}")
    return stmts


def _number(tok: str) -> float:
    """The value of a token that matches ``_NUMBER`` (``1d3`` is 1000, ``Inf`` infinite)."""
    t = tok.lower().replace("d", "e")
    return math.inf if t in ("inf", "+inf") else -math.inf if t == "-inf" else float(t)


def _matrix_rows(body: str, first_line: int):
    """The rows of a bracketed matrix body as ``(line number, tokens)``: rows end at ``;`` or a
    new line, values are split by blanks or commas, empty rows are skipped."""
    for k, line in enumerate(body.split("\n")):
        for part in line.split(";"):
            toks = part.replace(",", " ").split()
            if toks:
                yield first_line + k, toks


def _parse_matrix(body: str, first_line: int, path: str, name: str) -> tuple[np.ndarray, list[int]]:
    rows: list[list[float]] = []
    row_lines: list[int] = []
    for lineno, toks in _matrix_rows(body, first_line):
        vals = []
        for tok in toks:
            if not _NUMBER.fullmatch(tok):
                raise InputError(f"mpc.{name}: {tok[:40]!r} is not a number", where=f"{path}:{lineno}")
            vals.append(_number(tok))
        rows.append(vals)
        row_lines.append(lineno)
    if not rows:
        return np.zeros((0, 0)), []
    width = len(rows[0])
    for vals, lineno in zip(rows, row_lines):
        if len(vals) != width:
            raise InputError(f"mpc.{name}: a row of {len(vals)} values in a matrix of {width} columns",
                             where=f"{path}:{lineno}")
    return np.array(rows, dtype=float), row_lines


def _parse_cell(body: str, first_line: int, path: str, name: str) -> list[str]:
    out: list[str] = []
    for k, line in enumerate(body.split("\n")):
        rest = line.strip()
        while rest:
            rest = rest.lstrip(" \t,;")
            if not rest:
                break
            m = re.match(r"'((?:[^']|'')*)'", rest)
            if not m:
                raise InputError(f"mpc.{name}: expected a quoted string in the cell array",
                                 where=f"{path}:{first_line + k}")
            out.append(m.group(1).replace("''", "'"))
            rest = rest[m.end():]
    return out


_ASSIGN = re.compile(r"^\s*mpc\.([A-Za-z_]\w*)\s*=\s*(.*?)\s*;?\s*$", re.S)
_FUNCTION = re.compile(r"^\s*function\s+(?:\w+\s*=\s*)?([A-Za-z_]\w*)\s*$")


def parse_matpower(path: str | Path, data: bytes | None = None) -> MatpowerCase:
    """Parse a MATPOWER case file into its fields (no interpretation yet)."""
    path_s = str(path)
    raw = read_input_bytes(path, max_bytes=MAX_CASE_BYTES) if data is None else data
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    values: dict[str, Any] = {}
    lines: dict[str, int] = {}
    row_lines: dict[str, list[int]] = {}
    function = None
    for lineno, stmt in _statements(text, path_s):
        first = stmt.split("\n", 1)[0]
        fm = _FUNCTION.match(stmt)
        if fm:
            function = fm.group(1)
            continue
        m = _ASSIGN.match(stmt)
        if not m:
            if re.match(r"^\s*(end|return)\s*;?\s*$", stmt):
                continue
            raise InputError(f"expected an assignment 'mpc.<field> = ...;', got {first.strip()[:60]!r}",
                             where=f"{path_s}:{lineno}")
        name, rhs = m.group(1), m.group(2).strip()
        if name in values:
            raise InputError(f"mpc.{name} is assigned twice (first at line {lines[name]})", where=f"{path_s}:{lineno}")
        lines[name] = lineno
        if rhs.startswith("["):
            if not rhs.endswith("]"):
                raise InputError(f"mpc.{name}: expected the matrix to end with '];'", where=f"{path_s}:{lineno}")
            values[name], row_lines[name] = _parse_matrix(rhs[1:-1], lineno, path_s, name)
        elif rhs.startswith("{"):
            if not rhs.endswith("}"):
                raise InputError(f"mpc.{name}: expected the cell array to end with '}};'", where=f"{path_s}:{lineno}")
            values[name] = _parse_cell(rhs[1:-1], lineno, path_s, name)
        elif rhs.startswith("'"):
            sm = re.fullmatch(r"'((?:[^']|'')*)'", rhs)
            if not sm:
                raise InputError(f"mpc.{name}: unterminated string", where=f"{path_s}:{lineno}")
            values[name] = sm.group(1).replace("''", "'")
        elif _NUMBER.fullmatch(rhs):
            values[name] = float(rhs.lower().replace("d", "e"))
        else:
            raise InputError(f"mpc.{name}: expected a number, a quoted string, '[...]' or '{{...}}', "
                             f"got {rhs[:40]!r}", where=f"{path_s}:{lineno}")
    return MatpowerCase(path=path_s, function=function, values=values, lines=lines, row_lines=row_lines)


# ---- interpretation -------------------------------------------------------------------------

def _matrix(case: MatpowerCase, name: str) -> np.ndarray:
    if name not in case.values:
        raise InputError(f"the case has no mpc.{name} (a MATPOWER case needs baseMVA, bus, gen, branch"
                         f"{', gencost' if name == 'gencost' else ''})", where=f"{case.path}:1")
    m = case.values[name]
    if not isinstance(m, np.ndarray):
        raise InputError(f"mpc.{name} must be a numeric matrix '[...]'", where=case.where(name))
    if m.size == 0:
        raise InputError(f"mpc.{name} is empty", where=case.where(name))
    if m.shape[1] < _MIN_COLS[name]:
        raise InputError(f"mpc.{name} has {m.shape[1]} columns; the case format version 2 needs at least "
                         f"{_MIN_COLS[name]}", where=case.where(name))
    return m


def _costs(case: MatpowerCase, gc: np.ndarray, on: np.ndarray) -> np.ndarray:
    ng = on.size
    if gc.shape[0] not in (ng, 2 * ng):
        raise InputError(f"mpc.gencost has {gc.shape[0]} rows; expected one per generator ({ng}) or two "
                         f"({2 * ng}, with reactive costs)", where=case.where("gencost"))
    for r in range(ng, gc.shape[0]):
        if np.any(gc[r, 4:] != 0):
            raise InputError("reactive-power generator costs are not supported (only all-zero rows "
                             "ng+1..2ng are accepted)", where=case.where("gencost", r))
    coef = np.zeros((ng, 3))  # c2, c1, c0
    for r in range(ng):
        model, n = int(gc[r, 0]), gc[r, 3]
        if model == 1:
            raise InputError("piecewise-linear generator cost (model 1) is not supported: flowgauge networks "
                             "carry polynomial costs of degree <= 2 and a quadratic stand-in would move the "
                             "optimum; convert the case's costs to polynomial form first",
                             where=case.where("gencost", r))
        if model != 2:
            raise InputError(f"generator cost model {gc[r, 0]:g}; expected 1 (piecewise linear) or 2 (polynomial)",
                             where=case.where("gencost", r))
        if n != int(n) or n < 0 or 4 + int(n) > gc.shape[1]:
            raise InputError(f"NCOST {n:g} does not fit the row's {gc.shape[1] - 4} coefficient columns",
                             where=case.where("gencost", r))
        c = gc[r, 4:4 + int(n)]  # highest degree first
        if c.size > 3 and np.any(c[:-3] != 0):
            raise InputError(f"polynomial generator cost of degree {c.size - 1}; at most 2 (quadratic) is "
                             "supported", where=case.where("gencost", r))
        c = c[-3:]
        coef[r, 3 - c.size:] = c
    return coef[on]


def network_from_case(case: MatpowerCase, name: str | None = None) -> Network:
    """Interpret a parsed case (see the module docstring for the mapping)."""
    from ._checks import check_network

    path = case.path
    if "version" in case.values and str(case.values["version"]).strip() not in ("2",):
        raise InputError(f"MATPOWER case format version {case.values['version']!r}; only version '2' is supported",
                         where=case.where("version"))
    if "version" not in case.values:
        raise InputError("no mpc.version = '2'; only the MATPOWER case format version 2 is supported "
                         "(version 1 files have no such line)", where=f"{path}:1")
    base = case.values.get("baseMVA")
    if not isinstance(base, float):
        raise InputError("mpc.baseMVA must be a number", where=case.where("baseMVA") if base is not None else f"{path}:1")
    bus, gen, br = _matrix(case, "bus"), _matrix(case, "gen"), _matrix(case, "branch")
    if "gencost" in case.values:
        gc = _matrix(case, "gencost")
    else:
        gc = None
    for name_, m in (("bus", bus), ("gen", gen), ("branch", br)):
        bad = ~np.isfinite(m[:, :13 if name_ != "gen" else 10])
        if name_ == "gen":
            bad[:, 3:5] = False  # infinite Q limits are handled below
        if bad.any():
            r = int(np.flatnonzero(bad.any(axis=1))[0])
            raise InputError(f"mpc.{name_}: a value that is not a finite number", where=case.where(name_, r))
    btype = bus[:, 1].astype(np.int64)
    iso = np.flatnonzero(btype == 4)
    if iso.size:
        raise InputError(f"bus {bus[iso[0], 0]:g} has type 4 (isolated), which is not supported: remove isolated "
                         "buses and their branches first", where=case.where("bus", int(iso[0])))
    unknown = np.flatnonzero(~np.isin(btype, (BUS_PQ, BUS_PV, BUS_REF)))
    if unknown.size:
        raise InputError(f"bus type {bus[unknown[0], 1]:g}; expected 1 (PQ), 2 (PV), 3 (reference) or 4",
                         where=case.where("bus", int(unknown[0])))
    on = gen[:, 7] > 0
    coef = _costs(case, gc, on) if gc is not None else np.full((int(on.sum()), 3), np.nan)
    g = gen[on]
    qmax = np.where(np.isposinf(g[:, 3]), UNLIMITED_Q_MVAR, g[:, 3])
    qmin = np.where(np.isneginf(g[:, 4]), -UNLIMITED_Q_MVAR, g[:, 4])
    if not (np.all(np.isfinite(qmax)) and np.all(np.isfinite(qmin))):
        r = int(np.flatnonzero(on)[np.flatnonzero(~(np.isfinite(qmax) & np.isfinite(qmin)))[0]])
        raise InputError("QMAX is -Inf or QMIN is +Inf", where=case.where("gen", r))
    if np.any(np.isinf(g[:, 3:5])):
        warnings.warn(f"{path}: infinite reactive limits set to +/-{UNLIMITED_Q_MVAR:g} MVAr",
                      MatpowerImportWarning, stacklevel=3)
    has_load = (bus[:, 2] != 0) | (bus[:, 3] != 0)
    nload = int(has_load.sum())
    ng, nl = g.shape[0], br.shape[0]
    # MATPOWER treats an angle-difference limit of 0 as no limit (only non-zero values inside
    # (-360, 360) constrain; common practice of the case format), as does a value beyond +/-360.
    angmin = br[:, 11] if br.shape[1] > 12 else np.full(nl, -360.0)
    angmax = br[:, 12] if br.shape[1] > 12 else np.full(nl, 360.0)
    angmin = np.where((angmin == 0) | (angmin <= -360), -360.0, angmin)
    angmax = np.where((angmax == 0) | (angmax >= 360), 360.0, angmax)
    provenance: dict[str, Any] = {"source": f"MATPOWER case file {Path(path).name}",
                                  "imported_by": "flowgauge read_matpower"}
    if (~on).any():
        provenance["dropped_out_of_service_generators"] = int((~on).sum())
    names = case.values.get("bus_name")
    if isinstance(names, list):
        if len(names) != bus.shape[0]:
            raise InputError(f"mpc.bus_name has {len(names)} names for {bus.shape[0]} buses",
                             where=case.where("bus_name"))
        provenance["bus_names"] = [s.strip() for s in names]
    net = Network(
        name=name or case.function or Path(path).stem,
        base_mva=float(base),
        bus_id=bus[:, 0].astype(np.int64), bus_type=btype,
        vmin_pu=bus[:, 12], vmax_pu=bus[:, 11], base_kv=bus[:, 9], gs_mw=bus[:, 4], bs_mvar=bus[:, 5],
        vm_pu=bus[:, 7], va_deg=bus[:, 8],
        load_id=np.arange(1, nload + 1, dtype=np.int64), load_bus=bus[has_load, 0].astype(np.int64),
        pd_mw=bus[has_load, 2], qd_mvar=bus[has_load, 3],
        gen_id=np.arange(1, ng + 1, dtype=np.int64), gen_bus=g[:, 0].astype(np.int64),
        pmin_mw=g[:, 9], pmax_mw=g[:, 8], qmin_mvar=qmin, qmax_mvar=qmax, vg_pu=g[:, 5],
        pg_mw=g[:, 1], qg_mvar=g[:, 2], cost_c2=coef[:, 0], cost_c1=coef[:, 1], cost_c0=coef[:, 2],
        branch_id=np.arange(1, nl + 1, dtype=np.int64), from_bus=br[:, 0].astype(np.int64),
        to_bus=br[:, 1].astype(np.int64), r_pu=br[:, 2], x_pu=br[:, 3], b_pu=br[:, 4],
        rate_mva=np.where(br[:, 5] > 0, br[:, 5], np.nan), tap=np.where(br[:, 8] == 0, 1.0, br[:, 8]),
        shift_deg=br[:, 9], angmin_deg=angmin, angmax_deg=angmax, in_service=br[:, 10] > 0,
        provenance=provenance,
    )
    _check_rows(case, net, bus, gen, on)
    check_network(net, source=path)
    return net


def _check_rows(case: MatpowerCase, net: Network, bus: np.ndarray, gen: np.ndarray, on: np.ndarray) -> None:
    """Dangling references named by file:line (the network checks name elements, not lines)."""
    ids = set(net.bus_id.tolist())
    if len(ids) != net.n_bus:
        seen: set = set()
        for r, b in enumerate(net.bus_id.tolist()):
            if b in seen:
                raise InputError(f"bus number {b} appears twice", where=case.where("bus", r))
            seen.add(b)
    for r in np.flatnonzero(on):
        if int(gen[r, 0]) not in ids:
            raise InputError(f"generator at bus {gen[r, 0]:g}, which is not in mpc.bus", where=case.where("gen", int(r)))
    br = case.values["branch"]
    for r in range(br.shape[0]):
        for col in (0, 1):
            if int(br[r, col]) not in ids:
                raise InputError(f"branch {'from' if col == 0 else 'to'} bus {br[r, col]:g}, which is not in mpc.bus",
                                 where=case.where("branch", r))


def read_matpower(path: str | Path, *, name: str | None = None) -> Network:
    """Read a MATPOWER case file (format version 2) as a network; bad input raises
    :class:`InputError` naming ``file:line``."""
    return network_from_case(parse_matpower(path), name=name)


# ---- writing --------------------------------------------------------------------------------

def _fmt(x: float) -> str:
    if x == int(x) and abs(x) < 1e15:
        return str(int(x))
    return repr(float(x))


def _rows(m: np.ndarray) -> str:
    return "\n".join("\t" + "\t".join(_fmt(v) for v in row) + ";" for row in np.asarray(m, float))


def case_text(ppc: dict, name: str) -> str:
    """A case dict (``baseMVA``, ``bus``, ``gen``, ``branch``, optional ``gencost``, as from
    :func:`flowgauge.network.to_ppc` or PYPOWER) as MATPOWER case format version 2 text.
    Numbers are written with ``repr`` so they read back exactly."""
    if not re.fullmatch(r"[A-Za-z_]\w*", name):
        raise InputError(f"case name {name[:40]!r} is not a valid function name", where="name")
    parts = [f"function mpc = {name}", f"%{name.upper()}  written by flowgauge (MATPOWER case format version 2)", "",
             "mpc.version = '2';", f"mpc.baseMVA = {_fmt(float(ppc['baseMVA']))};", ""]
    for key in ("bus", "gen", "branch", "gencost"):
        if key in ppc and ppc[key] is not None:
            parts += [f"mpc.{key} = [", _rows(ppc[key]), "];", ""]
    return "\n".join(parts)


def write_matpower(net_or_ppc: Network | dict, path: str | Path, *, name: str | None = None) -> None:
    """Write a network (or a case dict) as a MATPOWER case file, atomically."""
    if isinstance(net_or_ppc, Network):
        from ._ppc import to_ppc
        ppc = to_ppc(net_or_ppc)
        name = name or re.sub(r"\W", "_", net_or_ppc.name)
        if not re.match(r"[A-Za-z_]", name):
            name = "case_" + name
    else:
        ppc = net_or_ppc
        name = name or Path(path).stem
    atomic_write_bytes(Path(path), case_text(ppc, name).encode("utf-8"))
