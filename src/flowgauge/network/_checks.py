"""Checks run on every network as it is loaded (JSON file, IEEE Common Data Format, or built
in code): the first problem found raises :class:`InputError` naming the element and field.

Elements are named by table, position (0-based, as in the JSON pointer ``/branches/7``) and
id, e.g. ``branch 7 (id 8), x_pu``. Every check is vectorised over the element arrays.
"""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ..errors import InputError
from ._model import BUS_TYPE_NAMES, Network

__all__ = ["check_network"]

# table name, id field, fields in that table (in Network attribute names)
_TABLES = {
    "bus": ("bus_id", ["bus_id", "bus_type", "vmin_pu", "vmax_pu", "base_kv", "gs_mw", "bs_mvar",
                       "vm_pu", "va_deg"]),
    "load": ("load_id", ["load_id", "load_bus", "pd_mw", "qd_mvar"]),
    "generator": ("gen_id", ["gen_id", "gen_bus", "pmin_mw", "pmax_mw", "qmin_mvar", "qmax_mvar",
                             "vg_pu", "pg_mw", "qg_mvar", "cost_c2", "cost_c1", "cost_c0"]),
    "branch": ("branch_id", ["branch_id", "from_bus", "to_bus", "r_pu", "x_pu", "b_pu", "rate_mva",
                             "tap", "shift_deg", "angmin_deg", "angmax_deg", "in_service"]),
}
# NaN means "absent" in these fields (no costs, no thermal limit).
_MAY_BE_NAN = ("cost_c2", "cost_c1", "cost_c0", "rate_mva")
_COSTS = ("cost_c2", "cost_c1", "cost_c0")
# Range rule for every number of a network: base_mva in (0, MAX_BASE_MVA], every other number
# at most MAX_MAGNITUDE in absolute value, in the file's units (MW, MVAr, MVA, p.u., degrees,
# kV, $). Published systems stay below 10,000 (a rating of 9,900 MVA meaning "no limit"); the
# bounds keep products and squares of values far from floating-point overflow in the solvers.
MAX_BASE_MVA = 1e6
MAX_MAGNITUDE = 1e9
# Network attribute -> field name in the JSON format, for messages.
_JSON_NAME = {"bus_id": "id", "bus_type": "type", "load_id": "id", "load_bus": "bus", "gen_id": "id",
              "gen_bus": "bus", "branch_id": "id", "cost_c2": "cost_c2_per_mw2h",
              "cost_c1": "cost_c1_per_mwh", "cost_c0": "cost_c0_per_h"}


def _fail(net: Network, source: str, table: str, bad: np.ndarray, field: str, message: str) -> None:
    """Raise for the first position in the boolean mask ``bad`` (shape (n_elements,)), if any."""
    pos = np.flatnonzero(bad)
    if pos.size == 0:
        return
    i = int(pos[0])
    ids = getattr(net, _TABLES[table][0])
    more = f" ({pos.size - 1} more {table} elements fail this check)" if pos.size > 1 else ""
    field = _JSON_NAME.get(field, field)
    raise InputError(message + more, where=f"{source}: {table} {i} (id {int(ids[i])}), {field}")


def _check_shapes(net: Network, source: str) -> None:
    for table, (_, names) in _TABLES.items():
        shapes = {name: np.shape(getattr(net, name)) for name in names}
        first = shapes[names[0]]
        for name, shape in shapes.items():
            if len(shape) != 1 or shape != first:
                raise InputError(f"expected shape {first} like {names[0]}, got {shape}",
                                 where=f"{source}: {table} field {_JSON_NAME.get(name, name)}")
    if not (isinstance(net.base_mva, (int, float, np.floating)) and np.isfinite(net.base_mva)
            and 0 < net.base_mva <= MAX_BASE_MVA):
        raise InputError(f"expected a positive number of at most {MAX_BASE_MVA:g} MVA, got {net.base_mva!r}",
                         where=f"{source}: base_mva")


def _check_finite(net: Network, source: str) -> None:
    for table, (_, names) in _TABLES.items():
        for name in names:
            a = np.asarray(getattr(net, name))
            if a.dtype.kind != "f" or name in _MAY_BE_NAN:
                continue
            _fail(net, source, table, ~np.isfinite(a), name, "non-finite value (expected a finite number)")
    for name in _MAY_BE_NAN:
        table = "branch" if name == "rate_mva" else "generator"
        a = getattr(net, name)
        _fail(net, source, table, np.isinf(a), name, "infinite value (expected a finite number, or null for absent)")
    for table, (_, names) in _TABLES.items():
        for name in names:
            a = np.asarray(getattr(net, name))
            if a.dtype.kind == "f":
                _fail(net, source, table, np.abs(np.nan_to_num(a)) > MAX_MAGNITUDE, name,
                      f"value out of range (expected at most {MAX_MAGNITUDE:g} in absolute value)")


def _check_ids(net: Network, source: str) -> None:
    for table, (id_name, _) in _TABLES.items():
        ids = np.asarray(getattr(net, id_name))
        if ids.dtype.kind not in "iu":
            raise InputError(f"expected integer ids, got dtype {ids.dtype}", where=f"{source}: {table} field id")
        order = np.argsort(ids, kind="stable")
        dup_sorted = np.zeros(ids.size, bool)
        dup_sorted[1:] = ids[order][1:] == ids[order][:-1]
        dup = np.zeros(ids.size, bool)
        dup[order] = dup_sorted
        _fail(net, source, table, dup, "id", f"duplicate {table} id (an earlier {table} has the same id)")


def _check_references(net: Network, source: str) -> None:
    bus_ids = np.asarray(net.bus_id)
    for table, field in (("load", "load_bus"), ("generator", "gen_bus"), ("branch", "from_bus"), ("branch", "to_bus")):
        ref = np.asarray(getattr(net, field))
        if ref.dtype.kind not in "iu":
            raise InputError(f"expected integer bus ids, got dtype {ref.dtype}",
                             where=f"{source}: {table} field {_JSON_NAME.get(field, field)}")
        missing = ~np.isin(ref, bus_ids)
        if missing.any():
            i = int(np.flatnonzero(missing)[0])
            _fail(net, source, table, missing, field, f"refers to bus {int(ref[i])}, which is not in the bus table")
    _fail(net, source, "branch", net.from_bus == net.to_bus, "to_bus", "branch connects a bus to itself")
    if net.n_bus and not np.any(net.in_service):
        raise InputError("the network has no branch in service; expected at least two buses joined by a branch",
                         where=f"{source}: branches")


def _check_values(net: Network, source: str) -> None:
    known = np.isin(net.bus_type, list(BUS_TYPE_NAMES))
    if not known.all():
        i = int(np.flatnonzero(~known)[0])
        _fail(net, source, "bus", ~known, "type",
              f"unknown bus type {int(net.bus_type[i])} (expected 1 PQ, 2 PV or 3 reference)")
    _fail(net, source, "bus", net.vmin_pu > net.vmax_pu, "vmin_pu", "vmin_pu is above vmax_pu")
    _fail(net, source, "bus", net.vmin_pu < 0, "vmin_pu", "negative voltage limit (expected >= 0)")
    _fail(net, source, "generator", net.pmin_mw > net.pmax_mw, "pmin_mw", "pmin_mw is above pmax_mw")
    _fail(net, source, "generator", net.qmin_mvar > net.qmax_mvar, "qmin_mvar", "qmin_mvar is above qmax_mvar")
    _fail(net, source, "generator", net.vg_pu <= 0, "vg_pu", "voltage setpoint must be positive")
    _fail(net, source, "branch", net.rate_mva < 0, "rate_mva",
          "negative rating (expected > 0, or null / 0 for no thermal limit)")
    _fail(net, source, "branch", (net.r_pu == 0) & (net.x_pu == 0), "x_pu",
          "zero impedance (r_pu = x_pu = 0); give a small reactance or merge the two buses")
    _fail(net, source, "branch", net.tap <= 0, "tap", "tap ratio must be positive (1.0 for a line)")
    _fail(net, source, "branch", net.angmin_deg > net.angmax_deg, "angmin_deg", "angmin_deg is above angmax_deg")


def _check_costs(net: Network, source: str) -> None:
    present = np.column_stack([np.isfinite(getattr(net, c)) for c in _COSTS]) if net.n_gen else np.zeros((0, 3), bool)
    partial = present.any(axis=1) & ~present.all(axis=1)
    if partial.any():
        missing = _COSTS[int(np.argmin(present[np.flatnonzero(partial)[0]]))]
        _fail(net, source, "generator", partial, missing,
              "cost coefficient is null while others are given (give all three, or none)")
    if present.any() and not present.all():
        _fail(net, source, "generator", ~present[:, 0], "cost_c1_per_mwh",
              "no costs for this generator, but other generators have costs (give costs for all or none)")


def _check_islands(net: Network, source: str) -> None:
    """Each connected component over in-service branches needs a reference bus."""
    n = net.n_bus
    if n == 0:
        raise InputError("the network has no buses", where=f"{source}: buses")
    on = np.asarray(net.in_service, bool)
    f, t = net.f_idx[on], net.t_idx[on]
    graph = coo_matrix((np.ones(f.size), (f, t)), shape=(n, n))
    n_comp, label = connected_components(graph, directed=False)
    has_ref = np.zeros(n_comp, bool)
    has_ref[label[net.bus_type == 3]] = True
    if has_ref.all():
        return
    comp = int(np.flatnonzero(~has_ref)[0])
    members = np.flatnonzero(label == comp)
    ids = ", ".join(str(int(b)) for b in net.bus_id[members[:8]]) + (", ..." if members.size > 8 else "")
    i = int(members[0])
    raise InputError(
        f"island of {members.size} bus(es) (ids {ids}) over in-service branches has no reference bus "
        f"(expected one bus of type 'reference' in each island)",
        where=f"{source}: bus {i} (id {int(net.bus_id[i])}), type")


def check_network(net: Network, *, source: str = "<network>") -> None:
    """Raise :class:`InputError` naming the element and field of the first problem found.

    Checked, in this order: array shapes and ``0 < base_mva <= 1e6``; finite numbers (costs and
    ``rate_mva`` may be NaN = absent) of at most 1e9 in absolute value; integer, unique ids in each table; references to buses
    that exist (loads, generators, both branch ends), no branch from a bus to itself and at least
    one branch in service; known
    bus types; vmin <= vmax, pmin <= pmax, qmin <= qmax, angmin <= angmax; positive voltage
    setpoints and tap ratios; ratings >= 0; no branch with r = x = 0; costs all given or all
    absent; a reference bus in every island over in-service branches.
    """
    _check_shapes(net, source)
    _check_finite(net, source)
    _check_ids(net, source)
    _check_references(net, source)
    _check_values(net, source)
    _check_costs(net, source)
    _check_islands(net, source)
