"""Power-flow benchmark: single solves against their per-iteration floor, and the batched solve
against a loop of single solves and against pandapower's ``runpp`` on the same samples.

Writes ``benchmarks/results/powerflow.json``. Run from the repository root::

    python benchmarks/powerflow.py            # full run (several minutes)
    python benchmarks/powerflow.py --quick    # short run while developing

Figures are medians of repeated runs; ratios compare measurements of the same run.
"""

from __future__ import annotations

import argparse
import logging
import os
import platform
import statistics
import sys
import time
import warnings
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np
import scipy
import scipy.sparse.linalg as spla

from flowgauge._io import atomic_write_bytes, canonical_json
from flowgauge.network import bundled_names, load_network, to_ppc
from flowgauge.powerflow import solve_powerflow, solve_powerflow_batch
from flowgauge.powerflow._newton import _mismatch
from flowgauge.powerflow._prepare import bus_injection_setpoints, prepared

OUT = Path(__file__).parent / "results" / "powerflow.json"
SEED = 20261201
LOAD_RANGE = (0.9, 1.1)


# The machine is shared: wall time depends on what else runs, so every figure is also taken
# in process CPU time, and the ratios use CPU time (the computation is single-threaded).
CLOCK = time.process_time


def _median_seconds(fn, repeats: int) -> float:
    fn()  # warm-up: caches, imports
    times = []
    for _ in range(repeats):
        t0 = CLOCK()
        fn()
        times.append(CLOCK() - t0)
    return statistics.median(times)


def _samples(net, n: int):
    rng = np.random.Generator(np.random.PCG64(SEED))
    f = rng.uniform(*LOAD_RANGE, (n, net.n_load))
    return net.pd_mw * f, net.qd_mvar * f


def single_solve(net, repeats: int) -> dict:
    """One base-case solve, and its floor: the sum over its iterations of (SuperLU factorisation
    + solve of that iteration's Jacobian, Jacobian assembly)."""
    r = solve_powerflow(net)
    t_solve = _median_seconds(lambda: solve_powerflow(net), repeats)
    p = prepared(net)
    pat = p.pattern(p.pv, p.pq)
    sbus = bus_injection_setpoints(p, net.pg_mw[None, :], net.qg_mvar[None, :], net.pd_mw[None, :],
                                   net.qd_mvar[None, :])
    t_lu, t_jac = [], []
    for k in range(r.iterations):  # the iterate after k Newton steps
        rk = solve_powerflow(net, max_iter=k)
        vm, e = rk.vm_pu[None, :], np.exp(1j * np.deg2rad(rk.va_deg))[None, :]
        f, i_bus = _mismatch(p.adm.ybus, vm, e, sbus, pat.pvpq, pat.pq)
        jac = pat.matrix(pat.values(vm, e, i_bus)[0])
        t_lu.append(_median_seconds(lambda: spla.splu(jac).solve(f[0]), repeats * 5))
        t_jac.append(_median_seconds(lambda: pat.matrix(pat.values(vm, e, i_bus)[0]), repeats * 5))
    floor = sum(t_lu) + sum(t_jac)
    return {"converged": r.converged, "iterations": r.iterations, "single_solve_s": t_solve,
            "lu_factor_solve_s": statistics.median(t_lu), "jacobian_assembly_s": statistics.median(t_jac),
            "floor_s": floor, "single_over_floor": t_solve / floor if floor > 0 else None}


def batched(net, n_samples: int, n_loop: int, repeats: int) -> dict:
    pd, qd = _samples(net, n_samples)
    out = {"n_samples": n_samples}
    for linear in ("stacked", "block", "loop"):
        m = n_samples if linear == "stacked" else max(n_loop, 1)
        t = _median_seconds(lambda: solve_powerflow_batch(net, pd_mw=pd[:m], qd_mvar=qd[:m], linear=linear),
                            repeats if linear == "stacked" else 1)
        out[f"batched_{linear}_samples_per_s"] = m / t
    b = solve_powerflow_batch(net, pd_mw=pd, qd_mvar=qd)
    out["converged_share"] = float(b.converged.mean())
    out["median_iterations"] = float(np.median(b.iterations))
    t0 = CLOCK()
    for k in range(n_loop):
        solve_powerflow(net, pd_mw=pd[k], qd_mvar=qd[k])
    out["single_loop_samples_per_s"] = n_loop / (CLOCK() - t0)
    out["single_loop_samples"] = n_loop
    out["batched_over_single_loop"] = out["batched_stacked_samples_per_s"] / out["single_loop_samples_per_s"]
    return out


def pandapower_rate(net, n: int) -> dict:
    """pandapower's runpp on the first ``n`` samples (net built once, loads changed per sample)."""
    try:
        import pandapower as pp
        from pandapower.converter.pypower import from_ppc
    except ImportError as exc:
        return {"error": f"pandapower not available: {exc}"}
    pd, qd = _samples(net, n)
    adm = prepared(net).adm
    pd_bus, qd_bus = (adm.cl @ pd.T).T, (adm.cl @ qd.T).T
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        logging.disable(logging.WARNING)
        try:
            pn = from_ppc(to_ppc(net), f_hz=60, validate_conversion=False)
            buses = net.bus_index(pn.load.bus.to_numpy())  # pandapower's bus index is the bus id
            opts = dict(tolerance_mva=1e-8 * net.base_mva, calculate_voltage_angles=True, max_iteration=20)
            pp.runpp(pn, **opts)  # warm-up
            t0 = CLOCK()
            for k in range(n):
                pn.load["p_mw"] = pd_bus[k, buses]
                pn.load["q_mvar"] = qd_bus[k, buses]
                pp.runpp(pn, **opts)
            dt = CLOCK() - t0
            vm_ours = solve_powerflow(net, pd_mw=pd[n - 1], qd_mvar=qd[n - 1]).vm_pu
            diff = float(np.abs(pn.res_bus.vm_pu.to_numpy() - vm_ours).max())
        except Exception as exc:  # a reference library failing on a case is a result to record
            return {"error": f"{type(exc).__name__}: {exc}"}
        finally:
            logging.disable(logging.NOTSET)
    return {"samples": n, "samples_per_s": n / dt, "max_vm_difference_pu": diff}


def synthetic_case(n_bus: int, repeats: int) -> dict:
    try:
        from flowgauge.network import synthetic
        net = synthetic(n_bus, 1)
    except Exception as exc:
        return {"error": f"synthetic network not available: {type(exc).__name__}: {exc}"}
    r = solve_powerflow(net)
    t = _median_seconds(lambda: solve_powerflow(net), repeats)
    fresh = synthetic(n_bus, 1)
    t0 = CLOCK()
    solve_powerflow(fresh)  # first solve of a network: includes admittance and pattern setup
    t_cold = CLOCK() - t0
    return {"n_bus": n_bus, "status": r.status, "iterations": r.iterations, "single_solve_s": t,
            "single_solve_first_call_s": t_cold}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer samples and repeats")
    args = ap.parse_args(argv)
    q = args.quick
    n_samples, n_loop, n_pp, reps = (200, 20, 10, 3) if q else (1000, 200, 50, 7)
    names = ["ieee14", "ieee118"] if q else bundled_names()
    result = {"benchmark": "powerflow", "quick": q, "clock": "process CPU time", "seed": SEED, "load_factor_range": list(LOAD_RANGE),
              "python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__,
              "machine": platform.machine(), "cpus": os.cpu_count(),
              "load_average_at_start": os.getloadavg()[0], "networks": {}}
    for name in names:
        net = load_network(name)
        row = {"buses": net.n_bus, **single_solve(net, reps), **batched(net, n_samples, n_loop, reps)}
        row["pandapower"] = pandapower_rate(net, n_pp)
        if "samples_per_s" in row["pandapower"]:
            row["batched_over_pandapower"] = row["batched_stacked_samples_per_s"] / row["pandapower"]["samples_per_s"]
        result["networks"][name] = row
        print(f"{name}: single {row['single_solve_s'] * 1e3:.2f} ms ({row['iterations']} it, "
              f"{row['single_over_floor']:.2f}x floor); batched {row['batched_stacked_samples_per_s']:.0f}/s, "
              f"loop {row['single_loop_samples_per_s']:.0f}/s, pandapower "
              f"{row['pandapower'].get('samples_per_s', float('nan')):.1f}/s", file=sys.stderr)
    result["synthetic"] = synthetic_case(2000 if q else 10_000, 1 if q else 3)
    print(f"synthetic: {result['synthetic']}", file=sys.stderr)
    result["load_average_at_end"] = os.getloadavg()[0]
    atomic_write_bytes(OUT, canonical_json(result, indent=1))
    print(f"wrote {OUT}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
