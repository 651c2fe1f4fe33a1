"""Per-sample network state: which branches, generators and bus shunts are in service.

A state is two bool arrays in the network's element order: ``branch_in_service`` shape
(n_branch,) and ``gen_in_service`` shape (n_gen,), and optionally a third,
``shunt_in_service`` shape (n_bus,): whether each bus's shunt (``gs_mw``, ``bs_mvar``) is
connected (a switched capacitor bank; a flag at a bus without a shunt changes nothing).
:func:`network_in_state` turns a state into
a :class:`Network` of the same shapes on which the power flow and the AC-OPF run unchanged and
give the results of the case with those elements removed (docs/topology.md lists the rules and
the two places where per-generator outputs of the power flow differ). :func:`sample_graph`
gives the in-service branches as an edge list with per-edge and per-bus features.

Elements are named as in the network checks: table, position (0-based) and id, e.g.
``branch 7 (id 8)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components, minimum_spanning_tree

from ..errors import InputError
from ._model import BUS_PQ, BUS_PV, Network

__all__ = [
    "ISLANDING", "ISLAND_WITHOUT_GENERATION", "REFERENCE_WITHOUT_GENERATION", "REASONS",
    "StateProblem", "Rejection", "SingleOutages", "GraphView", "EDGE_FEATURES", "NODE_FEATURES",
    "intact_state", "check_state", "state_problem", "network_in_state", "single_outages",
    "group_states", "check_states", "check_shunt_flags", "binding_in_state", "sample_graph",
]

# Reasons a state is refused, in the order they are checked.
ISLANDING = "islanding"
ISLAND_WITHOUT_GENERATION = "island without generation"
REFERENCE_WITHOUT_GENERATION = "reference bus without generation"
REASONS = (ISLANDING, ISLAND_WITHOUT_GENERATION, REFERENCE_WITHOUT_GENERATION)

# Names shown in messages, at most this many listed.
_MAX_LISTED = 8


def _sample_prefix(sample) -> str:
    return "" if sample is None else f"sample {sample}: "


def _element(net: Network, table: str, pos: int) -> str:
    ids = {"branch": net.branch_id, "generator": net.gen_id, "bus": net.bus_id}[table]
    return f"{table} {pos} (id {int(ids[pos])})"


def _bus_list(net: Network, members: np.ndarray) -> str:
    shown = ", ".join(f"{int(b)} (id {int(net.bus_id[b])})" for b in members[:_MAX_LISTED])
    more = f", ... ({members.size} in all)" if members.size > _MAX_LISTED else ""
    return ("bus " if members.size == 1 else "buses ") + shown + more


# ---- flags -------------------------------------------------------------------------------

def intact_state(net: Network) -> tuple[np.ndarray, np.ndarray]:
    """The network as it is: (``net.in_service`` copy (n_branch,), all True (n_gen,))."""
    return np.asarray(net.in_service, bool).copy(), np.ones(net.n_gen, bool)


def _flags(net: Network, value, field: str, table: str, n: int, sample) -> np.ndarray:
    where = f"{_sample_prefix(sample)}{field}"
    try:
        a = np.asarray(value)
    except (TypeError, ValueError):
        raise InputError(f"expected {n} true/false flags, got {type(value).__name__}", where=where) from None
    if a.shape != (n,):
        raise InputError(f"expected {n} flags (one per {table}, in the network's {table} order), "
                         f"got shape {a.shape}", where=where)
    if a.dtype.kind == "b":
        return a.astype(bool, copy=True)
    if a.dtype.kind in "iu":
        bad = (a != 0) & (a != 1)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"expected true/false (or 1/0), got {a[i]}", where=f"{where}, {_element(net, table, i)}")
        return a.astype(bool)
    raise InputError(f"expected true/false flags (bool), got values of dtype {a.dtype}", where=where)


def check_state(net: Network, branch_in_service, gen_in_service, *, sample=None) -> tuple[np.ndarray, np.ndarray]:
    """The flags as bool arrays (copies), shapes (n_branch,) and (n_gen,).

    Bool arrays, or integer arrays of 0 and 1, are accepted. Raises :class:`InputError` naming
    ``sample`` (when given), the field and the element for a wrong length or type, a value other
    than true/false, or a branch flagged in service that is out of service in the network.
    """
    br = _flags(net, branch_in_service, "branch_in_service", "branch", net.n_branch, sample)
    gen = _flags(net, gen_in_service, "gen_in_service", "generator", net.n_gen, sample)
    back = br & ~np.asarray(net.in_service, bool)
    if back.any():
        i = int(np.flatnonzero(back)[0])
        raise InputError("this branch is out of service in the network; a state can take branches out, "
                         "not put them in (expected false)",
                         where=f"{_sample_prefix(sample)}branch_in_service, {_element(net, 'branch', i)}")
    return br, gen


def check_shunt_flags(net: Network, shunt_in_service, *, sample=None) -> np.ndarray:
    """``shunt_in_service`` as a bool array (a copy), shape (n_bus,): one flag per bus, in the
    network's bus order (bool, or integers 0 and 1). Errors name ``sample``, the field and the bus."""
    return _flags(net, shunt_in_service, "shunt_in_service", "bus", net.n_bus, sample)


# ---- topology rules ----------------------------------------------------------------------

@dataclass(frozen=True)
class StateProblem:
    """Why a state is refused: ``reason`` (one of :data:`REASONS`), ``element`` (the outaged
    element to name, e.g. ``branch 13 (id 14)``) and ``message`` (one line, starting with the
    reason; errors put ``element`` in their ``where``)."""

    reason: str
    element: str
    message: str


def _components(net: Network, on: np.ndarray) -> tuple[int, np.ndarray]:
    n = net.n_bus
    f, t = net.f_idx[on], net.t_idx[on]
    graph = sp.coo_matrix((np.ones(f.size), (f, t)), shape=(n, n))
    return connected_components(graph, directed=False)


def state_problem(net: Network, branch_in_service: np.ndarray, gen_in_service: np.ndarray) -> StateProblem | None:
    """The first rule the (checked) state breaks, or None.

    Rules, in this order: (1) islanding: the in-service branches split the buses into more
    islands than the network's own; the island without a reference bus (or, if every island
    keeps one, the smallest new island) is named with the outaged branch that cut it off;
    (2) island without generation: an island holds no in-service generator; (3) reference bus
    without generation: a reference bus that holds generators in the network has none in service.
    """
    br = np.asarray(branch_in_service, bool)
    n_base, _ = _components(net, np.asarray(net.in_service, bool))
    problem, n_comp, label = _islanding(net, br, n_base)
    return problem or _generation(net, np.asarray(gen_in_service, bool), n_comp, label)


def _islanding(net: Network, br: np.ndarray, n_base: int) -> tuple[StateProblem | None, int, np.ndarray]:
    """Rule (1) and the islands of the state (count, label per bus)."""
    n_comp, label = _components(net, br)
    if n_comp <= n_base:
        return None, n_comp, label
    has_ref = np.zeros(n_comp, bool)
    has_ref[label[net.ref_idx]] = True
    size = np.bincount(label, minlength=n_comp)
    # islands without a reference bus first, then the smallest; ties by lowest label
    comp = int(np.lexsort((np.arange(n_comp), size, has_ref))[0])
    inside = label == comp
    cut = np.flatnonzero(np.asarray(net.in_service, bool) & ~br & (inside[net.f_idx] != inside[net.t_idx]))
    element = _element(net, "branch", int(cut[0]))
    return StateProblem(ISLANDING, element,
                        f"{ISLANDING}: {_bus_list(net, np.flatnonzero(inside))} cut off "
                        "(expected outages that keep the network in one piece)"), n_comp, label


def _generation(net: Network, gen: np.ndarray, n_comp: int, label: np.ndarray) -> StateProblem | None:
    """Rules (2) and (3) on islands ``label`` (n_bus,)."""
    gens_per_island = np.bincount(label[net.gen_bus_idx[gen]], minlength=n_comp)
    if np.any(gens_per_island == 0):
        comp = int(np.flatnonzero(gens_per_island == 0)[0])
        members = np.flatnonzero(label == comp)
        out = np.flatnonzero(~gen & (label[net.gen_bus_idx] == comp))
        element = _element(net, "generator", int(out[0])) if out.size else _element(net, "bus", int(members[0]))
        return StateProblem(ISLAND_WITHOUT_GENERATION, element,
                            f"{ISLAND_WITHOUT_GENERATION}: the island of {_bus_list(net, members)} has no "
                            "generator in service (expected at least one in every island)")
    had = np.bincount(net.gen_bus_idx, minlength=net.n_bus)[net.ref_idx] > 0
    has = np.bincount(net.gen_bus_idx[gen], minlength=net.n_bus)[net.ref_idx] > 0
    lost = net.ref_idx[had & ~has]
    if lost.size:
        b = int(lost[0])
        out = np.flatnonzero(~gen & (net.gen_bus_idx == b))
        element = _element(net, "generator", int(out[0]))
        return StateProblem(REFERENCE_WITHOUT_GENERATION, element,
                            f"{REFERENCE_WITHOUT_GENERATION}: reference {_element(net, 'bus', b)} has no "
                            "generator in service (expected the reference bus to keep one)")
    return None


# ---- the network of a state --------------------------------------------------------------

def network_in_state(net: Network, branch_in_service, gen_in_service, *, sample=None,
                     shunt_in_service=None) -> Network:
    """A :class:`Network` of the same shapes and element order as ``net`` for this state.

    Branches out: ``in_service`` False. Generators out: ``pmin_mw = pmax_mw = qmin_mvar =
    qmax_mvar = pg_mw = qg_mvar = 0`` and zero cost coefficients (NaN costs stay NaN), and
    ``vg_pu`` copied from the last in-service generator at its bus (else the bus's ``vm_pu``), so
    the default start voltages are those of the case without it. A PV bus left without an
    in-service generator becomes PQ. Bus shunts out (``shunt_in_service`` False, optional):
    ``gs_mw = bs_mvar = 0`` at that bus. The intact state returns ``net`` itself.

    Raises :class:`InputError` naming ``sample`` and the element for bad flags
    (:func:`check_state`, :func:`check_shunt_flags`) and for a state :func:`state_problem` refuses.
    """
    br, gen = check_state(net, branch_in_service, gen_in_service, sample=sample)
    shunt_out = None
    if shunt_in_service is not None:
        shunt_out = ~check_shunt_flags(net, shunt_in_service, sample=sample)
        shunt_out &= (np.asarray(net.gs_mw, float) != 0.0) | (np.asarray(net.bs_mvar, float) != 0.0)
        if not shunt_out.any():
            shunt_out = None
    problem = state_problem(net, br, gen)
    if problem is not None:
        raise InputError(problem.message, where=f"{_sample_prefix(sample)}{problem.element}")
    shunts = {} if shunt_out is None else {name: np.where(shunt_out, 0.0, np.asarray(getattr(net, name), float))
                                            for name in ("gs_mw", "bs_mvar")}
    if gen.all() and np.array_equal(br, np.asarray(net.in_service, bool)):
        return net.replace(**shunts) if shunts else net
    out = ~gen
    changes = {name: np.where(out, 0.0, np.asarray(getattr(net, name), float))
               for name in ("pmin_mw", "pmax_mw", "qmin_mvar", "qmax_mvar", "pg_mw", "qg_mvar")}
    for name in ("cost_c2", "cost_c1", "cost_c0"):
        c = np.asarray(getattr(net, name), float)
        changes[name] = np.where(out & np.isfinite(c), 0.0, c)
    gb = net.gen_bus_idx
    last_on = np.full(net.n_bus, -1)
    np.maximum.at(last_on, gb[gen], np.flatnonzero(gen))
    vg = np.array(net.vg_pu, float)
    keep = last_on[gb] >= 0
    vm_bus = np.where(net.vm_pu > 0, net.vm_pu, 1.0)
    vg[out] = np.where(keep, net.vg_pu[np.maximum(last_on[gb], 0)], vm_bus[gb])[out]
    bus_type = np.array(net.bus_type)
    has_gen = np.bincount(gb[gen], minlength=net.n_bus) > 0
    bus_type[(bus_type == BUS_PV) & ~has_gen] = BUS_PQ
    return net.replace(in_service=br, bus_type=bus_type, vg_pu=vg, **changes, **shunts)


def group_states(branch_in_service: np.ndarray, gen_in_service: np.ndarray, *more: np.ndarray) -> tuple:
    """Samples grouped by state, for solvers that run once per topology.

    ``branch_in_service`` (S, n_branch), ``gen_in_service`` (S, n_gen) bool, and any further
    per-sample flags (for example ``shunt_in_service`` (S, n_bus)). Returns (``branch`` (K,
    n_branch), ``gen`` (K, n_gen), the further flags (K, ...), ``group`` (S,) int64): the K
    distinct states, ordered by first appearance among the samples, and each sample's state
    number.
    """
    arrays = [np.asarray(a, bool) for a in (branch_in_service, gen_in_service, *more)]
    both = np.concatenate(arrays, axis=1)
    _, first, inverse = np.unique(both, axis=0, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")  # distinct states by first appearance
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    keep = np.sort(first)
    return (*(a[keep] for a in arrays), rank[np.ravel(inverse)].astype(np.int64))


def check_states(net: Network, branch_in_service, gen_in_service, sample_id, *,
                 shunt_in_service=None) -> tuple[np.ndarray, np.ndarray]:
    """Many samples' states at once: flags (S, n_branch) and (S, n_gen), ``sample_id`` (S,),
    optionally ``shunt_in_service`` (S, n_bus).

    Checks shapes and types, then each distinct state (:func:`group_states`) by
    :func:`check_state` and :func:`state_problem`; the first problem raises :class:`InputError`
    naming the first sample (in row order) that has it. Returns the branch and generator flags
    as bool arrays (the shunt flags, when given, are checked the same way and are bool).
    """
    sid = np.asarray(sample_id)
    n_s = sid.shape[0] if sid.ndim == 1 else -1
    out = []
    fields = [("branch_in_service", branch_in_service, net.n_branch), ("gen_in_service", gen_in_service, net.n_gen)]
    if shunt_in_service is not None:
        fields.append(("shunt_in_service", shunt_in_service, net.n_bus))
    for field, value, n in fields:
        a = np.asarray(value)
        if n_s < 0 or a.shape != (n_s, n):
            raise InputError(f"expected shape ({max(n_s, 0)}, {n}) (one row per sample, one flag per element), "
                             f"got {a.shape}", where=field)
        if a.dtype.kind != "b":
            raise InputError(f"expected true/false flags (bool), got values of dtype {a.dtype}", where=field)
        out.append(a)
    br, gen = out[:2]
    if n_s == 0:
        return br.copy(), gen.copy()
    *flags, group = group_states(*out)
    first = np.full(group.max() + 1, n_s)
    np.minimum.at(first, group, np.arange(n_s))
    for k in np.argsort(first, kind="stable").tolist():  # loop over distinct states, in row order
        network_in_state(net, flags[0][k], flags[1][k], sample=sid[first[k]].item(),
                         shunt_in_service=flags[2][k] if len(flags) > 2 else None)
    return br.copy(), gen.copy()


def binding_in_state(binding, net: Network, gen_in_service) -> tuple[str, ...]:
    """Binding-limit labels (``gen:<id>:pmax``, ...) of an AC-OPF solved on a state network,
    without those of generators out of service: their four limits are all 0, so the solver
    reports them as binding, where the case without them has no such labels. Order kept."""
    gen = np.asarray(gen_in_service, bool)
    out_ids = {str(int(i)) for i in np.asarray(net.gen_id)[~gen]}
    return tuple(lab for lab in binding
                 if not (lab.startswith("gen:") and lab.split(":")[1] in out_ids))


# ---- single outages ----------------------------------------------------------------------

@dataclass(frozen=True)
class Rejection:
    """A single outage refused: ``table`` ("branch" or "generator"), ``position`` in that
    table, ``reason`` (one of :data:`REASONS`) and ``message`` (``<element>: <reason>: ...``)."""

    table: str
    position: int
    reason: str
    message: str


@dataclass(frozen=True)
class SingleOutages:
    """The single outages of a network.

    ``branches``: positions of in-service branches whose outage is allowed, shape (k,) int64,
    ascending; ``generators``: likewise for generators; ``rejected``: the refused ones, branches
    first, each table in position order.
    """

    branches: np.ndarray
    generators: np.ndarray
    rejected: tuple[Rejection, ...]

    def counts(self) -> dict[str, int]:
        """Refused outages per reason (reasons in :data:`REASONS` order, zero counts left out)."""
        got = [r.reason for r in self.rejected]
        return {reason: got.count(reason) for reason in REASONS if reason in got}


def _rejection(net: Network, table: str, pos: int, p: StateProblem) -> Rejection:
    return Rejection(table, pos, p.reason, f"{_element(net, table, pos)}: {p.message}")


def _bridge_candidates(net: Network) -> np.ndarray:
    """In-service branches whose outage may split an island: those on a spanning forest of the
    in-service graph with no parallel branch (an outage off the forest leaves the forest whole)."""
    on = np.flatnonzero(np.asarray(net.in_service, bool))
    lo = np.minimum(net.f_idx[on], net.t_idx[on])
    hi = np.maximum(net.f_idx[on], net.t_idx[on])
    n = net.n_bus
    key = lo * n + hi
    uniq, count = np.unique(key, return_counts=True)
    graph = sp.coo_matrix((np.ones(uniq.size), (uniq // n, uniq % n)), shape=(n, n)).tocsr()
    tree = minimum_spanning_tree(graph).tocoo()
    tree_key = np.minimum(tree.row, tree.col).astype(np.int64) * n + np.maximum(tree.row, tree.col)
    single = uniq[count == 1]
    return on[np.isin(key, tree_key) & np.isin(key, single)]


def single_outages(net: Network) -> SingleOutages:
    """Every single outage of an in-service branch or a generator, checked by :func:`state_problem`.

    Only branches on a spanning forest without a parallel branch can island the network; those
    and every generator are checked one state at a time (a loop over candidate states).
    """
    br0, gen0 = intact_state(net)
    n_base, label0 = _components(net, br0)
    intact = _generation(net, gen0, n_base, label0)
    rejected: list[Rejection] = []
    bad_br: list[int] = []
    for i in _bridge_candidates(net).tolist():
        br = br0.copy()
        br[i] = False
        p = _islanding(net, br, n_base)[0] or intact
        if p is not None:
            bad_br.append(i)
            rejected.append(_rejection(net, "branch", i, p))
    if intact is not None:  # every outage keeps the intact network's problem
        other = np.setdiff1d(np.flatnonzero(br0), np.asarray(bad_br, np.int64))
        bad_br += other.tolist()
        rejected += [_rejection(net, "branch", int(i), intact) for i in other]
        rejected.sort(key=lambda r: r.position)
    bad_gen: list[int] = []
    for g in range(net.n_gen):
        gen = gen0.copy()
        gen[g] = False
        p = _generation(net, gen, n_base, label0)
        if p is not None:
            bad_gen.append(g)
            rejected.append(_rejection(net, "generator", g, p))
    branches = np.setdiff1d(np.flatnonzero(br0), np.asarray(bad_br, np.int64))
    generators = np.setdiff1d(np.arange(net.n_gen), np.asarray(bad_gen, np.int64))
    return SingleOutages(branches=branches.astype(np.int64), generators=generators.astype(np.int64),
                         rejected=tuple(rejected))


# ---- graph view --------------------------------------------------------------------------

EDGE_FEATURES = ("r_pu", "x_pu", "b_pu", "rate_mva", "tap", "shift_deg")
NODE_FEATURES = ("pd_mw", "qd_mvar", "gs_mw", "bs_mvar", "vmin_pu", "vmax_pu", "pmin_mw", "pmax_mw",
                 "qmin_mvar", "qmax_mvar", "bus_type")


@dataclass(frozen=True)
class GraphView:
    """One sample's network as a graph; nodes are buses in the network's bus order.

    ``edge_index``: shape (n_edge, 2) int64, bus positions (from end, to end) of the in-service
    branches, in branch order. ``edge_branch``: shape (n_edge,) int64, their branch positions.
    ``edge_features``: shape (n_edge, 6) float64, columns :data:`EDGE_FEATURES`: resistance,
    reactance, total charging susceptance [p.u. on base_mva], rating [MVA] (NaN: no limit),
    off-nominal tap ratio (1.0 for a line), phase shift [deg].
    ``node_features``: shape (n_bus, 11) float64, columns :data:`NODE_FEATURES`: load P and Q
    summed per bus [MW], [MVAr], shunt conductance and susceptance [MW], [MVAr at 1 p.u.],
    voltage limits [p.u.], P and Q limits of the in-service generators summed per bus [MW],
    [MVAr] (0 at a bus without one), bus type in this state (1 PQ, 2 PV, 3 reference).
    """

    edge_index: np.ndarray
    edge_branch: np.ndarray
    edge_features: np.ndarray
    node_features: np.ndarray

    @property
    def n_edge(self) -> int:
        return int(self.edge_index.shape[0])

    def edge(self, name: str) -> np.ndarray:
        """One column of ``edge_features`` by name, shape (n_edge,)."""
        return self.edge_features[:, EDGE_FEATURES.index(name)]

    def node(self, name: str) -> np.ndarray:
        """One column of ``node_features`` by name, shape (n_bus,)."""
        return self.node_features[:, NODE_FEATURES.index(name)]


def _loads(name: str, value, n: int, sample) -> np.ndarray:
    where = f"{_sample_prefix(sample)}{name}"
    try:
        a = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"expected {n} numbers, got {type(value).__name__}", where=where) from None
    if a.shape != (n,):
        raise InputError(f"expected shape ({n},) (one per load, in the network's load order), got {a.shape}",
                         where=where)
    if not np.all(np.isfinite(a)):
        raise InputError(f"non-finite value at load {int(np.flatnonzero(~np.isfinite(a))[0])}", where=where)
    return a


def sample_graph(net: Network, branch_in_service, pd_mw, qd_mvar, gen_in_service=None, *,
                 sample=None, shunt_in_service=None) -> GraphView:
    """The graph of one sample: ``branch_in_service`` (n_branch,) bool, loads ``pd_mw``,
    ``qd_mvar`` (n_load,) [MW], [MVAr], ``gen_in_service`` (n_gen,) bool (None: all in service),
    ``shunt_in_service`` (n_bus,) bool (None: every bus shunt connected; a shunt out reads 0 in
    ``gs_mw`` and ``bs_mvar``).

    The view describes the state as given; it does not refuse islanding states
    (:func:`network_in_state` does). Bad flags or loads raise :class:`InputError` naming ``sample``.
    """
    if gen_in_service is None:
        gen_in_service = np.ones(net.n_gen, bool)
    br, gen = check_state(net, branch_in_service, gen_in_service, sample=sample)
    pd = _loads("pd_mw", pd_mw, net.n_load, sample)
    qd = _loads("qd_mvar", qd_mvar, net.n_load, sample)
    shunt = np.ones(net.n_bus, bool) if shunt_in_service is None else check_shunt_flags(net, shunt_in_service,
                                                                                         sample=sample)
    edges = np.flatnonzero(br)
    edge_index = np.stack([net.f_idx[edges], net.t_idx[edges]], axis=1).astype(np.int64).reshape(-1, 2)
    edge_features = np.stack([np.asarray(getattr(net, k), float)[edges] for k in EDGE_FEATURES], axis=1)
    nb, gb = net.n_bus, net.gen_bus_idx[gen]

    def per_bus(idx, w):
        return np.bincount(idx, weights=w, minlength=nb)

    bus_type = np.array(net.bus_type, float)
    bus_type[(bus_type == BUS_PV) & (np.bincount(gb, minlength=nb) == 0)] = BUS_PQ
    nodes = [per_bus(net.load_bus_idx, pd), per_bus(net.load_bus_idx, qd),
             np.where(shunt, np.asarray(net.gs_mw, float), 0.0), np.where(shunt, np.asarray(net.bs_mvar, float), 0.0),
             np.asarray(net.vmin_pu, float), np.asarray(net.vmax_pu, float),
             per_bus(gb, net.pmin_mw[gen]), per_bus(gb, net.pmax_mw[gen]),
             per_bus(gb, net.qmin_mvar[gen]), per_bus(gb, net.qmax_mvar[gen]), bus_type]
    node_features = np.stack(nodes, axis=1)
    node_features[node_features == 0.0] = 0.0  # no negative zero
    return GraphView(edge_index=edge_index, edge_branch=edges.astype(np.int64),
                     edge_features=edge_features.reshape(-1, len(EDGE_FEATURES)), node_features=node_features)

