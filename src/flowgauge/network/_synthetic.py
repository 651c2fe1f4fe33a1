"""Synthetic transmission networks of 50 to 10,000 buses for scaling measurements.

The method (documented in docs/networks.md):

1. Two levels: 80% of the buses form a meshed 345 kV grid; each of the other 20% is a 138 kV
   substation fed from a distinct 345 kV bus by one transformer.
2. 345 kV positions: uniform points in a square whose side grows with sqrt(n), so line lengths
   (median about 20 km, 99% under 55 km) do not depend on the size.
3. 345 kV topology: the Euclidean minimum spanning tree of the points (on their Delaunay
   triangulation) keeps the grid connected; extra Delaunay edges, chosen with a random
   preference for short ones, mesh it to an average bus degree of 2.7 over all buses.
4. Lines: length = straight distance x a route factor; reactance, x/r ratio and charging per
   km of a 345 kV line. Transformers: reactance 0.12 p.u. on their rating, x/r 40, tap on the
   345 kV side from {0.975, 0.9875, 1.0, 1.0125}.
5. Loads at every 138 kV bus and at 345 kV buses up to 80% of all buses (log-normal sizes,
   lagging power factor 0.95-0.99). Generators at 25% of the 345 kV buses (20% of all), an
   equal share of every square region of about 20 buses; log-normal sizes clipped to a 20x
   range and scaled to 1.4x each region's load; reactive range -0.3 to +0.5 of capacity; cheap
   baseload, mid-merit and peaking cost classes with quadratic costs.
6. Base case: every generator at the same fraction of its capacity, covering the load plus
   the losses estimated from a DC power flow; voltage setpoints 1.02 p.u.; the largest
   generator's bus is the reference bus; start angles ``va_deg`` from that DC power flow.
7. Ratings: lines get the DC base-case flow times a random margin of 1.3-2.2, at least 150 MVA,
   rounded up to 10 MVA; transformers the same from the load they feed. So limits are
   plausible, do not bind in the base case, and some bind when load grows or dispatch moves.

All randomness comes from ``numpy.random.Generator(numpy.random.PCG64(seed))``, drawn in a fixed
order: the same (n_bus, seed) gives identical arrays.
"""

from __future__ import annotations

import numbers

import numpy as np
import scipy.sparse as sp
from scipy.sparse import csgraph
from scipy.sparse.linalg import splu
from scipy.spatial import Delaunay

from ..errors import InputError
from ._model import BUS_PQ, BUS_PV, BUS_REF, Network

__all__ = ["synthetic", "MIN_BUSES", "MAX_BUSES"]

MIN_BUSES, MAX_BUSES = 50, 10_000
BASE_MVA = 100.0
BASE_KV, LV_KV = 345.0, 138.0     # the meshed grid, and substations hanging off it
LV_SHARE = 0.2                   # share of buses at 138 kV, each fed by one 345/138 kV transformer
TRAFO_X_OWN, TRAFO_X_OVER_R = 0.12, 40.0   # on the transformer's rating (common practice)
TRAFO_TAPS = np.array([0.975, 0.9875, 1.0, 1.0125])
KM_PER_UNIT_SIDE = 25.0          # square side [km] = this x sqrt(number of 345 kV buses)
ROUTE_FACTOR = (1.05, 1.35)      # line length over straight distance
MIN_LINE_KM = 2.0
AVERAGE_DEGREE = 2.7             # real transmission grids: about 2.5-3 (common practice)
X_OHM_PER_KM = 0.37              # 345 kV single circuit, bundled conductors (common practice)
B_SIEMENS_PER_KM = 4.4e-6
X_OVER_R = (6.0, 12.0)
LOAD_SHARE, GEN_SHARE = 0.8, 0.2
LOAD_MEDIAN_MW, LOAD_SIGMA = 35.0, 0.6
POWER_FACTOR = (0.95, 0.99)
CAPACITY_OVER_LOAD = 1.4
GEN_SIGMA, GEN_SIZE_RANGE = 0.7, 20.0
Q_RANGE_PER_MW = (-0.3, 0.5)
# one voltage setpoint: unequal setpoints at nearby PV buses drive large reactive flows
VG_PU = 1.02
REGION_BUSES = 20                # generation is balanced against load per region of about this many buses
VMIN_PU, VMAX_PU = 0.94, 1.06
# cost classes: share, c1 range [$/MWh]; c2 = c1 x k / pmax with k in K_RANGE (marginal cost
# rises 10-40% from zero to full output)
COST_CLASSES = [(0.3, 8.0, 20.0), (0.45, 25.0, 45.0), (0.25, 60.0, 120.0)]
K_RANGE = (0.05, 0.2)
RATING_MARGIN = (1.3, 2.2)
MIN_RATING_MVA, RATING_STEP_MVA = 150.0, 10.0


def synthetic(n_bus: int, seed: int = 0) -> Network:
    """A connected, solvable synthetic network with ``n_bus`` buses, deterministic in ``seed``.

    ``n_bus``: integer from 50 to 10,000. ``seed``: non-negative integer. Buses 1..n_hv are the
    345 kV grid, the rest 138 kV substations; loads, generators and branches are numbered 1.. in
    their array order (lines first, then transformers).
    """
    n = _check_args(n_bus, seed)
    rng = np.random.Generator(np.random.PCG64(seed))
    n_lv = int(round(LV_SHARE * n))
    n_hv = n - n_lv
    xy = rng.random((n_hv, 2)) * KM_PER_UNIT_SIDE * np.sqrt(n_hv)        # [km]
    f, t = _topology(xy, int(round(AVERAGE_DEGREE * n / 2)) - n_lv, rng)
    line = _line_parameters(xy, f, t, rng)
    parent = np.sort(rng.choice(n_hv, n_lv, replace=False)).astype(np.int64)
    load_bus, pd, qd = _loads(n_hv, n_lv, rng)
    lv_load = np.bincount(load_bus, weights=pd, minlength=n)[n_hv:]
    trafo = _transformers(lv_load, rng)
    f = np.concatenate([f, parent])
    t = np.concatenate([t, np.arange(n_hv, n, dtype=np.int64)])
    branch = {k: np.concatenate([line[k], trafo[k]]) for k in ("r", "x", "b")}
    region = np.concatenate([_regions(xy), _regions(xy)[parent]])
    gen = _generators(region, n_hv, load_bus, pd, rng)
    bus_type = np.full(n, BUS_PQ, dtype=np.int64)
    bus_type[gen["bus"]] = BUS_PV
    ref = gen["bus"][np.argmax(gen["pmax"])]
    bus_type[ref] = BUS_REF
    pg, flow_mw, va = _base_dispatch(n, f, t, branch, load_bus, pd, gen["bus"], gen["pmax"], ref)
    rate = np.concatenate([_ratings(flow_mw[: line["x"].size], rng), trafo["rate"]])
    vm = np.ones(n)
    vm[gen["bus"]] = gen["vg"]
    n_br, n_gen = f.size, gen["bus"].size
    return Network(
        name=f"synthetic-{n}-seed{seed}",
        base_mva=BASE_MVA,
        bus_id=np.arange(1, n + 1, dtype=np.int64), bus_type=bus_type,
        vmin_pu=np.full(n, VMIN_PU), vmax_pu=np.full(n, VMAX_PU),
        base_kv=np.r_[np.full(n_hv, BASE_KV), np.full(n_lv, LV_KV)],
        gs_mw=np.zeros(n), bs_mvar=np.zeros(n), vm_pu=vm, va_deg=np.round(np.degrees(va), 4),
        load_id=np.arange(1, load_bus.size + 1, dtype=np.int64), load_bus=load_bus + 1,
        pd_mw=pd, qd_mvar=qd,
        gen_id=np.arange(1, n_gen + 1, dtype=np.int64), gen_bus=gen["bus"] + 1,
        pmin_mw=np.zeros(n_gen), pmax_mw=gen["pmax"], qmin_mvar=gen["qmin"], qmax_mvar=gen["qmax"],
        vg_pu=gen["vg"], pg_mw=pg, qg_mvar=np.zeros(n_gen),
        cost_c2=gen["c2"], cost_c1=gen["c1"], cost_c0=gen["c0"],
        branch_id=np.arange(1, n_br + 1, dtype=np.int64), from_bus=f + 1, to_bus=t + 1,
        r_pu=branch["r"], x_pu=branch["x"], b_pu=branch["b"], rate_mva=rate,
        tap=np.r_[np.ones(line["x"].size), trafo["tap"]],
        shift_deg=np.zeros(n_br), angmin_deg=np.full(n_br, -360.0), angmax_deg=np.full(n_br, 360.0),
        in_service=np.ones(n_br, dtype=bool),
        provenance={
            "source": "synthetic network generated by flowgauge.network.synthetic; not a real system",
            "n_bus": n, "seed": int(seed),
            "method": "docs/networks.md (synthetic networks)",
        },
    )


def _check_args(n_bus, seed) -> int:
    if (isinstance(n_bus, bool) or not isinstance(n_bus, numbers.Integral)
            or not MIN_BUSES <= n_bus <= MAX_BUSES):
        raise InputError(f"n_bus must be an integer from {MIN_BUSES} to {MAX_BUSES}, got {n_bus!r}",
                         where="n_bus")
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0:
        raise InputError(f"seed must be a non-negative integer, got {seed!r}", where="seed")
    return int(n_bus)


def _topology(xy: np.ndarray, n_edges: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Line end positions (from < to), sorted: spanning tree plus short meshing edges, about
    ``n_edges`` in all."""
    n = xy.shape[0]
    tri = Delaunay(xy).simplices
    pairs = np.sort(np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [0, 2]]]), axis=1)
    pairs = np.unique(pairs, axis=0)
    length = np.linalg.norm(xy[pairs[:, 0]] - xy[pairs[:, 1]], axis=1)
    graph = sp.coo_matrix((length + 1e-9, (pairs[:, 0], pairs[:, 1])), shape=(n, n)).tocsr()
    tree = csgraph.minimum_spanning_tree(graph).tocoo()
    in_tree = np.zeros(pairs.shape[0], dtype=bool)
    key = pairs[:, 0].astype(np.int64) * n + pairs[:, 1]
    tree_key = np.minimum(tree.row, tree.col).astype(np.int64) * n + np.maximum(tree.row, tree.col)
    in_tree[np.searchsorted(key, tree_key)] = True
    n_extra = max(0, n_edges - (n - 1))
    candidates = np.flatnonzero(~in_tree)
    priority = length[candidates] * rng.lognormal(0.0, 0.5, candidates.size)
    extra = candidates[np.argsort(priority, kind="stable")[:n_extra]]
    chosen = np.sort(np.concatenate([np.flatnonzero(in_tree), extra]))
    return pairs[chosen, 0].astype(np.int64), pairs[chosen, 1].astype(np.int64)


def _line_parameters(xy, f, t, rng) -> dict[str, np.ndarray]:
    """Series r, x and total charging b [p.u. on BASE_MVA, BASE_KV], shape (n_branch,)."""
    km = np.linalg.norm(xy[f] - xy[t], axis=1) * rng.uniform(*ROUTE_FACTOR, f.size)
    km = np.maximum(km, MIN_LINE_KM)
    z_base = BASE_KV**2 / BASE_MVA
    x = X_OHM_PER_KM * km / z_base
    r = x / rng.uniform(*X_OVER_R, f.size)
    b = B_SIEMENS_PER_KM * km * z_base
    return {"r": np.round(r, 7), "x": np.round(x, 7), "b": np.round(b, 7)}


def _loads(n_hv: int, n_lv: int, rng) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Load bus positions (every 138 kV bus, then enough 345 kV buses for LOAD_SHARE of all,
    sorted), pd [MW] and qd [MVAr] (lagging), shape (n_load,)."""
    n_load_hv = max(0, int(round(LOAD_SHARE * (n_hv + n_lv))) - n_lv)
    bus = np.sort(np.r_[rng.choice(n_hv, n_load_hv, replace=False), np.arange(n_hv, n_hv + n_lv)])
    pd = np.round(LOAD_MEDIAN_MW * rng.lognormal(0.0, LOAD_SIGMA, bus.size), 2)
    pf = rng.uniform(*POWER_FACTOR, bus.size)
    qd = np.round(pd * np.tan(np.arccos(pf)), 2)
    return bus.astype(np.int64), pd, qd


def _transformers(lv_load_mw: np.ndarray, rng) -> dict[str, np.ndarray]:
    """345/138 kV transformers, one per 138 kV bus: nameplate rating [MVA] from the load below
    times a margin, impedance on that rating, off-nominal tap on the 345 kV side."""
    rate = _ratings(lv_load_mw, rng)
    x = TRAFO_X_OWN * BASE_MVA / rate
    return {"r": np.round(x / TRAFO_X_OVER_R, 7), "x": np.round(x, 7), "b": np.zeros(rate.size),
            "rate": rate, "tap": rng.choice(TRAFO_TAPS, rate.size)}


def _generators(region: np.ndarray, n_hv: int, load_bus: np.ndarray, pd: np.ndarray,
                rng) -> dict[str, np.ndarray]:
    """Generator bus positions (sorted), capacities, reactive ranges, setpoints and costs.

    Generators sit at 345 kV buses, an equal share of each region's (``region``: shape (n_bus,),
    region number of each bus), so no area is far from voltage support; capacities are scaled
    per region to CAPACITY_OVER_LOAD times the region's load, so long-distance transfers stay
    moderate at any size."""
    bus = _spread_choice(region[:n_hv], GEN_SHARE * region.size / n_hv, rng)
    n_gen = bus.size
    half_range = np.sqrt(GEN_SIZE_RANGE)
    size = np.clip(rng.lognormal(0.0, GEN_SIGMA, n_gen), 1.0 / half_range, half_range)
    n_region = int(region.max()) + 1
    region_load = np.bincount(region[load_bus], weights=pd, minlength=n_region)
    region_size = np.bincount(region[bus], weights=size, minlength=n_region)
    # every region holds a generator (_spread_choice), so each one's share is well defined
    mine = region[bus]
    pmax = np.round(size * CAPACITY_OVER_LOAD * region_load[mine] / region_size[mine], 1)
    share = np.array([c[0] for c in COST_CLASSES])
    cls = rng.choice(len(COST_CLASSES), n_gen, p=share / share.sum())
    lo = np.array([c[1] for c in COST_CLASSES])[cls]
    hi = np.array([c[2] for c in COST_CLASSES])[cls]
    c1 = np.round(rng.uniform(lo, hi), 2)
    c2 = np.round(c1 * rng.uniform(*K_RANGE, n_gen) / pmax, 6)
    c0 = np.round(pmax * rng.uniform(0.5, 2.0, n_gen), 1)
    vg = np.full(n_gen, VG_PU)
    return {"bus": bus, "pmax": pmax, "qmin": np.round(Q_RANGE_PER_MW[0] * pmax, 1),
            "qmax": np.round(Q_RANGE_PER_MW[1] * pmax, 1), "vg": vg, "c2": c2, "c1": c1, "c0": c0}


def _spread_choice(region: np.ndarray, share: float, rng) -> np.ndarray:
    """Sorted positions of about ``share`` of the items of each region (at least one per
    non-empty region), chosen at random within the region."""
    order = np.lexsort((rng.random(region.size), region))
    grouped = region[order]
    rank = np.arange(region.size) - np.searchsorted(grouped, grouped, side="left")
    quota = np.maximum(1, np.round(share * np.bincount(region)))
    return np.sort(order[rank < quota[grouped]]).astype(np.int64)


def _regions(xy: np.ndarray) -> np.ndarray:
    """Region number of each bus, shape (n_bus,): square cells holding about REGION_BUSES buses."""
    n = xy.shape[0]
    cells = max(1, int(round(np.sqrt(n / REGION_BUSES))))
    side = xy.max() * (1 + 1e-12)
    ij = np.minimum((xy / side * cells).astype(np.int64), cells - 1)
    return ij[:, 0] * cells + ij[:, 1]


def _dc_flow(n, f, t, x, p_mw, ref) -> tuple[np.ndarray, np.ndarray]:
    """DC power flow for injections p_mw, shape (n_bus,): branch flows [MW], shape (n_branch,),
    and bus angles [rad], shape (n_bus,)."""
    y = 1.0 / x
    inc = sp.csr_matrix((np.r_[np.ones(f.size), -np.ones(f.size)],
                         (np.r_[np.arange(f.size), np.arange(f.size)], np.r_[f, t])), shape=(f.size, n))
    bbus = (inc.T @ sp.diags(y) @ inc).tocsc()
    keep = np.flatnonzero(np.arange(n) != ref)
    theta = np.zeros(n)
    theta[keep] = splu(bbus[keep][:, keep].tocsc()).solve(p_mw[keep] / BASE_MVA)
    return y * (theta[f] - theta[t]) * BASE_MVA, theta


def _base_dispatch(n, f, t, branch, load_bus, pd, gen_bus, pmax, ref) -> tuple[np.ndarray, ...]:
    """Generator outputs [MW] at one common fraction of capacity covering load plus estimated
    losses (sum of r f^2 over the DC flow); the DC branch flows [MW] and bus angles [rad] of
    the lossless dispatch."""
    load_at_bus = np.bincount(load_bus, weights=pd, minlength=n)
    total = pd.sum()
    pg = pmax * (total / pmax.sum())
    injection = np.bincount(gen_bus, weights=pg, minlength=n) - load_at_bus
    flow, theta = _dc_flow(n, f, t, branch["x"], injection, ref)
    loss_mw = float(np.sum(branch["r"] * (flow / BASE_MVA) ** 2) * BASE_MVA)
    pg = np.round(pmax * ((total + loss_mw) / pmax.sum()), 2)
    return pg, flow, theta


def _ratings(flow_mw: np.ndarray, rng) -> np.ndarray:
    """Thermal ratings [MVA]: |base flow| x a random margin, at least MIN_RATING_MVA."""
    rate = np.maximum(np.abs(flow_mw) * rng.uniform(*RATING_MARGIN, flow_mw.size), MIN_RATING_MVA)
    return np.ceil(rate / RATING_STEP_MVA) * RATING_STEP_MVA
