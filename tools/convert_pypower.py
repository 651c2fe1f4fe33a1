"""Convert the IEEE test systems shipped inside the PYPOWER package (PyPI) into the
flowgauge network format, keeping PYPOWER's generator costs and branch ratings.

Usage: python tools/convert_pypower.py [OUT_DIR]   (default: src/flowgauge/network/data)

Loads: one load per bus with a non-zero Pd or Qd, in bus order. Out-of-service generators
are dropped (none in the converted cases); branch in-service flags are kept. A branch rate
of 0 in the source means "no thermal limit" and becomes null.
"""

from __future__ import annotations

import importlib.metadata
import sys
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))

from flowgauge.network._json import write_network_json  # noqa: E402
from flowgauge.network._model import Network  # noqa: E402

CASES = {
    "ieee14": ("case14", "IEEE 14-bus test system"),
    "ieee30": ("case30", "IEEE 30-bus test system as modified by Alsac and Stott (costs and limits), PYPOWER case30"),
    "ieee57": ("case57", "IEEE 57-bus test system"),
    "ieee118": ("case118", "IEEE 118-bus test system"),
    "ieee300": ("case300", "IEEE 300-bus test system"),
}


def convert(name: str) -> Network:
    from pypower import api

    func, title = CASES[name]
    ppc = getattr(api, func)()
    bus, gen, br, gc = (np.asarray(ppc[k], float) for k in ("bus", "gen", "branch", "gencost"))
    gen_on = gen[:, 7] > 0
    gen, gc = gen[gen_on], gc[: len(gen_on)][gen_on]
    if not np.all(gc[:, 0] == 2) or not np.all(gc[:, 3] <= 3):
        raise SystemExit(f"{func}: only polynomial costs of degree <= 2 are supported")
    ncost = gc[:, 3].astype(int)
    coef = np.zeros((len(gen), 3))  # c2, c1, c0
    for k in (1, 2, 3):
        rows = ncost == k
        coef[rows, 3 - k:] = gc[rows, 4:4 + k]
    has_load = (bus[:, 2] != 0) | (bus[:, 3] != 0)
    nload = int(has_load.sum())
    angmin = br[:, 11] if br.shape[1] > 12 else np.full(len(br), -360.0)
    angmax = br[:, 12] if br.shape[1] > 12 else np.full(len(br), 360.0)
    version = importlib.metadata.version("PYPOWER")
    return Network(
        name=name,
        base_mva=float(ppc["baseMVA"]),
        bus_id=bus[:, 0].astype(np.int64), bus_type=bus[:, 1].astype(np.int64),
        vmin_pu=bus[:, 12], vmax_pu=bus[:, 11], base_kv=bus[:, 9], gs_mw=bus[:, 4], bs_mvar=bus[:, 5],
        vm_pu=bus[:, 7], va_deg=bus[:, 8],
        load_id=np.arange(1, nload + 1, dtype=np.int64), load_bus=bus[has_load, 0].astype(np.int64),
        pd_mw=bus[has_load, 2], qd_mvar=bus[has_load, 3],
        gen_id=np.arange(1, len(gen) + 1, dtype=np.int64), gen_bus=gen[:, 0].astype(np.int64),
        pmin_mw=gen[:, 9], pmax_mw=gen[:, 8], qmin_mvar=gen[:, 4], qmax_mvar=gen[:, 3], vg_pu=gen[:, 5],
        pg_mw=gen[:, 1], qg_mvar=gen[:, 2], cost_c2=coef[:, 0], cost_c1=coef[:, 1], cost_c0=coef[:, 2],
        branch_id=np.arange(1, len(br) + 1, dtype=np.int64), from_bus=br[:, 0].astype(np.int64),
        to_bus=br[:, 1].astype(np.int64), r_pu=br[:, 2], x_pu=br[:, 3], b_pu=br[:, 4],
        rate_mva=np.where(br[:, 5] > 0, br[:, 5], np.nan), tap=np.where(br[:, 8] == 0, 1.0, br[:, 8]),
        shift_deg=br[:, 9], angmin_deg=angmin, angmax_deg=angmax, in_service=br[:, 10] > 0,
        provenance={
            "title": title,
            "source": f"PYPOWER {version} (PyPI package 'PYPOWER'), module pypower.{func}",
            "original_source": "IEEE Common Data Format test case data, as distributed with MATPOWER/PYPOWER",
            "licence": "PYPOWER is distributed under a BSD-style licence (Copyright (c) 1996-2015 PSERC); "
                       "the IEEE test-system data are public",
            "converted_by": "tools/convert_pypower.py",
            "notes": "one load per bus with non-zero demand; branch rate 0 means no thermal limit (null); "
                     "generator costs are PYPOWER's polynomial costs",
        },
    )


def main(argv: list[str]) -> int:
    out = Path(argv[1]) if len(argv) > 1 else ROOT / "src" / "flowgauge" / "network" / "data"
    for name in CASES:
        net = convert(name)
        write_network_json(net, out / f"{name}.json")
        print(f"{name}: {net.n_bus} buses, {net.n_branch} branches, {net.n_gen} generators, {net.n_load} loads")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv))
