"""Scoring speed per network, and the restoration power flow against pandapower's runpp.

For each network: S samples of loads drawn around the base case (uniform +-10 % per load) and
predictions made from the base case's dispatch and voltage setpoints (perturbed +-3 % / +-0.01
p.u.), then the whole scorer core (raw metrics, restoration power flows, limit checks,
aggregation, bootstrap) is timed: samples per second. The reference cost of each sample is the
base dispatch's cost scaled with the total load (the timing does not depend on its value).

In the same run, pandapower's ``runpp`` (Newton-Raphson, same tolerance, reactive limits not
enforced) is timed on the first samples with the same setpoints, on a pandapower network built
once with ``from_ppc(to_ppc(net), f_hz=60)``; the ratio of its median time per sample to ours is
the restoration speed-up. The largest voltage differences to pandapower and to PYPOWER's runpf
(first 3 samples) are recorded: pandapower's conversion of ieee300 gives a different case (our
result agrees with PYPOWER to 1e-13 p.u. there), so its ratio compares solvers, not answers.

Usage: python benchmarks/score.py [--samples 10000] [--networks ieee14,ieee118] [--pandapower 30]
Writes benchmarks/results/score.json. Medians of --repeat runs.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import time
import warnings
from pathlib import Path

import numpy as np
from numpy.random import PCG64, Generator

from flowgauge import __version__
from flowgauge._io import atomic_write_text
from flowgauge.network import load_network, to_ppc
from flowgauge.scoring import DEFAULT_PROFILE, generator_cost_per_h, restore, score_arrays

OUT = Path(__file__).parent / "results" / "score.json"


def inputs(net, samples: int, seed: int):
    rng = Generator(PCG64(seed))
    scale = rng.uniform(0.9, 1.1, (samples, net.n_load))
    pd, qd = net.pd_mw * scale, net.qd_mvar * scale
    level = pd.sum(1) / net.pd_mw.sum()
    pg = net.pg_mw * level[:, None] * rng.uniform(0.97, 1.03, (samples, net.n_gen))
    vm = np.broadcast_to(net.vm_pu, (samples, net.n_bus)).copy()
    first = np.unique(net.gen_bus_idx, return_index=True)[1]
    vm[:, net.gen_bus_idx[first]] = net.vg_pu[first] + rng.uniform(-0.01, 0.01, (samples, first.size))
    ref = generator_cost_per_h(net.pg_mw[None], cost_c2=net.cost_c2, cost_c1=net.cost_c1,
                               cost_c0=net.cost_c0)[0] * level
    return pd, qd, pg, vm, ref


def time_scoring(net, samples: int, repeat: int, seed: int, workers: int) -> dict:
    pd, qd, pg, vm, ref = inputs(net, samples, seed)
    sid = np.arange(samples)
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        agg, _ = score_arrays(net, sample_id=sid, pd_mw=pd, qd_mvar=qd, reference_cost_per_h=ref, pg_mw=pg,
                              vm_pu=vm, profile=DEFAULT_PROFILE, workers=workers)
        times.append(time.perf_counter() - t0)
    med = statistics.median(times)
    return {"samples": samples, "workers": workers, "seconds_median": med, "samples_per_second": samples / med,
            "restoration_failure_rate": agg["restoration_failure_rate"],
            "restoration_diverged_share": agg["restoration_failure_causes"]["diverged"]}


def pandapower_net(net):
    from pandapower.converter.pypower import from_ppc

    ppc = to_ppc(net)
    ppc["bus"][:, 9] = np.where(ppc["bus"][:, 9] > 0, ppc["bus"][:, 9], 100.0)  # pandapower needs a kV level
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return from_ppc(ppc, f_hz=60, validate_conversion=False)


def time_restoration(net, samples: int, pp_samples: int, seed: int) -> dict:
    import pandapower as pp

    pd, qd, pg, vm, _ = inputs(net, samples, seed)
    t0 = time.perf_counter()
    ours = restore(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, vm_pu=vm, profile=DEFAULT_PROFILE)
    ours_per = (time.perf_counter() - t0) / samples

    pn = pandapower_net(net)
    nb = net.n_bus
    pd_bus = (np.eye(nb)[net.load_bus_idx].T @ pd.T).T  # loads summed per bus, as to_ppc does
    qd_bus = (np.eye(nb)[net.load_bus_idx].T @ qd.T).T
    load_bus = net.bus_index(pn.load.bus.to_numpy())  # pandapower indexes buses by id
    ref_bus = set(net.ref_idx.tolist())
    gen_rows = [g for g in range(net.n_gen) if net.gen_bus_idx[g] not in ref_bus]
    per, dv = [], 0.0
    for k in range(pp_samples):
        pn.load["p_mw"] = pd_bus[k, load_bus]
        pn.load["q_mvar"] = qd_bus[k, load_bus]
        pn.gen["p_mw"] = pg[k, gen_rows]
        pn.gen["vm_pu"] = vm[k, net.gen_bus_idx[gen_rows]]
        pn.ext_grid["vm_pu"] = vm[k, net.bus_index(pn.ext_grid.bus.to_numpy())]
        t0 = time.perf_counter()
        pp.runpp(pn, algorithm="nr", tolerance_mva=1e-8 * net.base_mva, max_iteration=20, enforce_q_lims=False,
                 init="dc", calculate_voltage_angles=True, numba=False)
        per.append(time.perf_counter() - t0)
        if ours.converged[k]:
            vm_pp = pn.res_bus.vm_pu.loc[net.bus_id].to_numpy()
            dv = max(dv, float(np.abs(vm_pp - ours.vm_pu[k]).max()))
    pp_per = statistics.median(per)
    return {"samples": samples, "ours_seconds_per_sample": ours_per, "pandapower_samples": pp_samples,
            "pandapower_seconds_per_sample_median": pp_per, "speedup": pp_per / ours_per,
            "max_vm_difference_vs_pandapower_pu": dv,
            "max_vm_difference_vs_pypower_pu": pypower_difference(net, pd, qd, pg, vm, ours, 3)}


def pypower_difference(net, pd, qd, pg, vm, ours, count: int) -> float:
    """Largest voltage difference to PYPOWER's runpf on the first ``count`` samples: a check that
    both solvers got the same case (pandapower's conversion of some cases differs from the data)."""
    from pypower.api import ppoption, runpf

    opt = ppoption(VERBOSE=0, OUT_ALL=0, PF_TOL=1e-10, ENFORCE_Q_LIMS=0)
    dv = 0.0
    for k in range(count):
        ppc = to_ppc(net, pd[k], qd[k])
        ppc["gen"][:, 1] = pg[k]
        ppc["gen"][:, 5] = vm[k, net.gen_bus_idx]
        res = runpf(ppc, opt)[0]
        if res["success"] and ours.converged[k]:
            dv = max(dv, float(np.abs(res["bus"][:, 7] - ours.vm_pu[k]).max()))
    return dv


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--samples", type=int, default=10000)
    ap.add_argument("--networks", default="ieee14,ieee30,ieee57,ieee118,ieee300")
    ap.add_argument("--pandapower", type=int, default=30, help="samples timed with pandapower")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=11)
    args = ap.parse_args()
    results = {}
    for name in args.networks.split(","):
        net = load_network(name)
        results[name] = {"scoring": time_scoring(net, args.samples, args.repeat, args.seed, 1),
                         "scoring_2_workers": time_scoring(net, args.samples, args.repeat, args.seed, 2),
                         "restoration": time_restoration(net, min(args.samples, 1000), args.pandapower, args.seed)}
        print(name, json.dumps(results[name]), flush=True)
    doc = {"benchmark": "score", "flowgauge_version": __version__, "python": platform.python_version(),
           "machine": platform.machine(), "cpus": os.cpu_count(), "samples": args.samples,
           "targets": {"ieee118_10000_samples_seconds": 10.0, "restoration_speedup_vs_pandapower": 50.0},
           "networks": results}
    OUT.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(OUT, json.dumps(doc, indent=1, sort_keys=True) + "\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
