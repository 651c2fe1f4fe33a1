"""Generate the bundled fictional demo network, ``src/flowgauge/network/data/demo.json``.

Usage: python tools/make_demo_network.py [OUT_FILE]

The network is the made-up island of Tarrowmere (see docs/networks.md): a 132 kV backbone that
carries cheap hydro power from the northern highlands south to the port town of Vellhaven, and
33 kV substations feeding the towns. Every number below is a design choice for flowgauge, set
from typical per-kilometre line data and transformer nameplates; no real system is described.

Deterministic: the same script gives the same bytes (canonical JSON, fixed rounding).
"""

from __future__ import annotations

import sys
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))

from flowgauge.network._json import write_network_json  # noqa: E402
from flowgauge.network._model import BUS_PQ, BUS_PV, BUS_REF, Network  # noqa: E402

BASE_MVA = 100.0

# Per-kilometre series impedance and charging of the two overhead line types [ohm/km, S/km]
# (typical values for 132 kV and 33 kV single-circuit overhead lines; common practice).
LINE_TYPES = {
    132.0: {"r_ohm_km": 0.08, "x_ohm_km": 0.40, "b_s_km": 2.85e-6},
    33.0: {"r_ohm_km": 0.25, "x_ohm_km": 0.37, "b_s_km": 3.3e-6},
}
# 132/33 kV transformers: impedance on their own rating (common practice for 20-90 MVA units).
TRAFO_R_OWN, TRAFO_X_OWN = 0.005, 0.11

# id, name, kV, voltage limits [p.u.], shunt capacitor [MVAr at 1 p.u.]
BUSES = [
    (1, "Orvanne Falls 132 kV (hydro station)", 132, 0.95, 1.06, 0.0),
    (2, "Skarrow Ridge 132 kV (switching station)", 132, 0.95, 1.06, 0.0),
    (3, "Tessaford 132 kV", 132, 0.95, 1.06, 0.0),
    (4, "Vellhaven North 132 kV", 132, 0.95, 1.06, 0.0),
    (5, "Vellhaven Harbour 132 kV (gas station)", 132, 0.95, 1.06, 0.0),
    (6, "Quillmere 132 kV", 132, 0.95, 1.06, 0.0),
    (7, "Larkspire 132 kV", 132, 0.95, 1.06, 0.0),
    (8, "Cindral 132 kV (geothermal station)", 132, 0.95, 1.06, 0.0),
    (9, "Pennowick 132 kV", 132, 0.95, 1.06, 0.0),
    (10, "Mirrowdale 132 kV", 132, 0.95, 1.06, 0.0),
    (11, "Greyshore 132 kV (wind farm)", 132, 0.95, 1.06, 0.0),
    (12, "Orvanne Falls 33 kV", 33, 0.94, 1.06, 0.0),
    (13, "Skarrow Ridge 33 kV", 33, 0.94, 1.06, 0.0),
    (14, "Tessaford 33 kV", 33, 0.94, 1.06, 0.0),
    (15, "Tessaford Sawmill 33 kV (biomass plant)", 33, 0.94, 1.06, 0.0),
    (16, "Vellhaven Old Town 33 kV", 33, 0.94, 1.06, 0.0),
    (17, "Vellhaven Docks 33 kV", 33, 0.94, 1.06, 10.0),
    (18, "Vellhaven Hillside 33 kV", 33, 0.94, 1.06, 0.0),
    (19, "Vellhaven Eastgate 33 kV", 33, 0.94, 1.06, 0.0),
    (20, "Quillmere 33 kV", 33, 0.94, 1.06, 0.0),
    (21, "Quillmere Airfield 33 kV", 33, 0.94, 1.06, 0.0),
    (22, "Larkspire 33 kV", 33, 0.94, 1.06, 0.0),
    (23, "Cindral 33 kV (diesel station)", 33, 0.94, 1.06, 0.0),
    (24, "Cindral Fish Works 33 kV", 33, 0.94, 1.06, 0.0),
    (25, "Pennowick 33 kV (diesel station)", 33, 0.94, 1.06, 0.0),
    (26, "Pennowick Quarry 33 kV", 33, 0.94, 1.06, 4.0),
    (27, "Mirrowdale 33 kV", 33, 0.94, 1.06, 0.0),
    (28, "Mirrowdale Creamery 33 kV", 33, 0.94, 1.06, 3.0),
]

# bus, active power [MW], power factor (lagging)
LOADS = [
    (12, 4.0, 0.95), (13, 6.0, 0.93), (14, 22.0, 0.95), (15, 14.0, 0.82),
    (16, 38.0, 0.96), (17, 30.0, 0.80), (18, 32.0, 0.97), (19, 26.0, 0.94),
    (20, 20.0, 0.95), (21, 8.0, 0.90), (22, 14.0, 0.95), (23, 12.0, 0.95),
    (24, 10.0, 0.85), (25, 12.0, 0.95), (26, 9.0, 0.78), (27, 11.0, 0.96),
    (28, 7.0, 0.88),
]

# bus, kind, pmin, pmax [MW], qmin, qmax [MVAr], voltage setpoint [p.u.], c2 [$/MW^2h], c1 [$/MWh], c0 [$/h]
GENERATORS = [
    (1, "hydro unit 1", 0.0, 150.0, -50.0, 75.0, 1.04, 0.004, 6.0, 0.0),
    (1, "hydro unit 2", 0.0, 150.0, -50.0, 75.0, 1.04, 0.004, 6.0, 0.0),
    (5, "gas combined cycle", 10.0, 90.0, -35.0, 55.0, 1.03, 0.02, 42.0, 150.0),
    (5, "gas turbine (open cycle)", 0.0, 40.0, -15.0, 25.0, 1.03, 0.05, 78.0, 60.0),
    (8, "geothermal", 10.0, 35.0, -12.0, 20.0, 1.03, 0.01, 18.0, 40.0),
    (11, "wind farm", 0.0, 30.0, -10.0, 10.0, 1.02, 0.0, 1.0, 0.0),
    (15, "biomass (sawmill residue)", 0.0, 12.0, -5.0, 8.0, 1.02, 0.03, 38.0, 20.0),
    (23, "diesel peaker", 0.0, 20.0, -8.0, 12.0, 1.02, 0.20, 160.0, 25.0),
    (25, "diesel peaker", 0.0, 20.0, -8.0, 12.0, 1.02, 0.20, 170.0, 25.0),
]

# 132 kV and 33 kV lines: from, to, length [km], rating [MVA]
LINES = [
    (1, 2, 45.0, 130.0), (1, 2, 45.0, 130.0),           # the northern hydro corridor, two circuits
    (2, 3, 30.0, 120.0), (2, 4, 50.0, 120.0), (3, 4, 25.0, 120.0), (4, 5, 8.0, 150.0),
    (3, 9, 35.0, 90.0), (9, 11, 20.0, 60.0), (9, 10, 30.0, 90.0), (10, 4, 25.0, 90.0),
    (5, 6, 30.0, 90.0), (6, 7, 25.0, 90.0), (7, 8, 35.0, 90.0), (8, 5, 45.0, 90.0),
    (2, 7, 55.0, 90.0),
    (14, 15, 6.0, 25.0), (16, 18, 3.0, 30.0), (16, 19, 4.0, 30.0), (20, 21, 5.0, 20.0),
    (23, 24, 5.0, 20.0), (25, 26, 7.0, 20.0), (27, 28, 9.0, 15.0),
]

# 132/33 kV transformers: HV bus, LV bus, rating [MVA], off-nominal tap on the HV side
TRANSFORMERS = [
    (1, 12, 20.0, 1.0), (2, 13, 20.0, 1.0), (3, 14, 60.0, 0.975), (4, 16, 60.0, 0.975),
    (4, 18, 60.0, 1.0), (5, 17, 60.0, 0.9625), (5, 19, 45.0, 1.0), (6, 20, 45.0, 0.9625),
    (7, 22, 30.0, 1.0), (8, 23, 45.0, 1.0), (9, 25, 30.0, 0.975), (10, 27, 30.0, 0.9625),
]

SCENARIO = (
    "Tarrowmere is a made-up island with 275 MW of demand in the base case. Two hydro units at "
    "Orvanne Falls in the northern highlands are the cheapest source; their power reaches the south "
    "over a double-circuit 132 kV corridor to the Skarrow Ridge switching station, which congests once "
    "demand rises about 10% above the base case. The port town of Vellhaven holds nearly half the "
    "demand and a gas station (combined cycle plus an open-cycle turbine). A geothermal plant at "
    "Cindral, a wind farm at Greyshore and a biomass plant at the Tessaford sawmill add mid-priced "
    "and cheap energy; diesel peakers at Cindral and Pennowick are the expensive last resort. Towns "
    "are fed through 132/33 kV transformers, several with off-nominal taps; industrial loads "
    "(docks, sawmill, quarry, fish works) run at lower power factors than the towns."
)


def _branches() -> dict[str, np.ndarray]:
    lines = np.array([row for row in LINES], float)
    kv = np.array([BUSES[int(f) - 1][2] for f in lines[:, 0]], float)
    z_base = kv**2 / BASE_MVA
    r_km = np.array([LINE_TYPES[k]["r_ohm_km"] for k in kv])
    x_km = np.array([LINE_TYPES[k]["x_ohm_km"] for k in kv])
    b_km = np.array([LINE_TYPES[k]["b_s_km"] for k in kv])
    length = lines[:, 2]
    trafo = np.array(TRANSFORMERS, float)
    scale = BASE_MVA / trafo[:, 2]
    return {
        "from_bus": np.concatenate([lines[:, 0], trafo[:, 0]]).astype(np.int64),
        "to_bus": np.concatenate([lines[:, 1], trafo[:, 1]]).astype(np.int64),
        "r_pu": np.round(np.concatenate([r_km * length / z_base, TRAFO_R_OWN * scale]), 6),
        "x_pu": np.round(np.concatenate([x_km * length / z_base, TRAFO_X_OWN * scale]), 6),
        "b_pu": np.round(np.concatenate([b_km * length * z_base, np.zeros(len(trafo))]), 6),
        "rate_mva": np.concatenate([lines[:, 3], trafo[:, 2]]),
        "tap": np.concatenate([np.ones(len(lines)), trafo[:, 3]]),
    }


def build_demo() -> Network:
    """The Tarrowmere island network (flat start; generators at their base-case dispatch)."""
    bus = np.array([row[:1] + row[2:] for row in BUSES], float)
    n_bus = len(bus)
    gen = np.array([row[:1] + row[2:] for row in GENERATORS], float)
    bus_type = np.full(n_bus, BUS_PQ, dtype=np.int64)
    bus_type[gen[:, 0].astype(int) - 1] = BUS_PV
    bus_type[0] = BUS_REF
    load = np.array(LOADS, float)
    qd = load[:, 1] * np.tan(np.arccos(load[:, 2]))
    br = _branches()
    n_br = len(br["from_bus"])
    base_pg = _base_dispatch(gen, load[:, 1].sum())
    vg = gen[:, 5]
    vm = np.ones(n_bus)
    vm[gen[:, 0].astype(int) - 1] = vg
    return Network(
        name="demo",
        base_mva=BASE_MVA,
        bus_id=bus[:, 0].astype(np.int64), bus_type=bus_type, vmin_pu=bus[:, 2], vmax_pu=bus[:, 3],
        base_kv=bus[:, 1], gs_mw=np.zeros(n_bus), bs_mvar=bus[:, 4], vm_pu=vm, va_deg=np.zeros(n_bus),
        load_id=np.arange(1, len(load) + 1, dtype=np.int64), load_bus=load[:, 0].astype(np.int64),
        pd_mw=load[:, 1], qd_mvar=np.round(qd, 3),
        gen_id=np.arange(1, len(gen) + 1, dtype=np.int64), gen_bus=gen[:, 0].astype(np.int64),
        pmin_mw=gen[:, 1], pmax_mw=gen[:, 2], qmin_mvar=gen[:, 3], qmax_mvar=gen[:, 4], vg_pu=vg,
        pg_mw=base_pg, qg_mvar=np.zeros(len(gen)),
        cost_c2=gen[:, 6], cost_c1=gen[:, 7], cost_c0=gen[:, 8],
        branch_id=np.arange(1, n_br + 1, dtype=np.int64), from_bus=br["from_bus"], to_bus=br["to_bus"],
        r_pu=br["r_pu"], x_pu=br["x_pu"], b_pu=br["b_pu"], rate_mva=br["rate_mva"], tap=br["tap"],
        shift_deg=np.zeros(n_br), angmin_deg=np.full(n_br, -360.0), angmax_deg=np.full(n_br, 360.0),
        in_service=np.ones(n_br, dtype=bool),
        provenance=_provenance(n_lines=len(LINES)),
    )


def _base_dispatch(gen: np.ndarray, total_load_mw: float) -> np.ndarray:
    """Base-case setpoints [MW]: economic dispatch of 4% more than the demand (a loss estimate;
    the reference bus takes up the actual losses in a power flow), at one marginal cost found by
    bisection and ignoring the network; rounded to 0.1 MW."""
    pmin, pmax, c2, c1 = gen[:, 1], gen[:, 2], gen[:, 6], gen[:, 7]
    target = 1.04 * total_load_mw

    def output(price: float) -> np.ndarray:
        return np.clip((price - c1) / (2.0 * np.maximum(c2, 1e-9)), pmin, pmax)

    lo, hi = 0.0, float(np.max(c1 + 2.0 * c2 * pmax))
    for _ in range(100):  # bisection on the marginal price [$/MWh]
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if output(mid).sum() < target else (lo, mid)
    return np.round(output(hi), 1)


def _provenance(n_lines: int) -> dict:
    return {
        "title": "Tarrowmere island demo network",
        "source": "fictional network designed for flowgauge; not a real system",
        "scenario": SCENARIO,
        "generated_by": "tools/make_demo_network.py",
        "licence": "same licence as flowgauge",
        "bus_names": {str(b[0]): b[1] for b in BUSES},
        "generator_kinds": {str(i + 1): g[1] for i, g in enumerate(GENERATORS)},
        "notes": (f"branches 1-{n_lines} are overhead lines (132 kV: r 0.08, x 0.40 ohm/km, "
                  "b 2.85 uS/km; 33 kV: r 0.25, x 0.37 ohm/km, b 3.3 uS/km); the rest are 132/33 kV "
                  "transformers (r 0.005, x 0.11 p.u. on their rating, tap on the 132 kV side); loads "
                  "lagging at the power factors of the generator tool; costs quadratic in MW"),
    }


def main(argv: list[str]) -> int:
    out = Path(argv[1]) if len(argv) > 1 else ROOT / "src" / "flowgauge" / "network" / "data" / "demo.json"
    net = build_demo()
    write_network_json(net, out)
    print(f"{out}: {net.n_bus} buses, {net.n_branch} branches, {net.n_gen} generators, "
          f"{net.n_load} loads, {net.total_load_mw():.1f} MW")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv))
