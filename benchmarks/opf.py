"""Optimal power flow benchmark: flowgauge's interior-point AC-OPF against, in the same run,
Ipopt on an independent casadi formulation (solve time only, model building excluded),
PYPOWER's ``runopf`` and pandapower's ``runopp``; robustness counts over stressed and random
loadings; maximum loadability; a 2,000-bus synthetic network; the DC-OPF against PYPOWER's
``rundcopf``.

Writes ``benchmarks/results/opf.json``. Run from the repository root::

    python benchmarks/opf.py            # full run (several minutes)
    python benchmarks/opf.py --quick    # short run while developing

Times are medians of repeated runs in process CPU time (the machine is shared, so wall time
depends on other work); ratios compare measurements of the same run.
"""

from __future__ import annotations

import argparse
import importlib.util
import logging
import platform
import statistics
import sys
import time
import warnings
from collections import Counter
from pathlib import Path

import numpy as np
import scipy

from flowgauge._io import atomic_write_bytes, canonical_json
from flowgauge.network import bundled_names, load_network, synthetic, to_ppc
from flowgauge.opf import ACOPF, OPFSettings, max_loadability, solve_dcopf

ROOT = Path(__file__).resolve().parents[1]
OUT = Path(__file__).parent / "results" / "opf.json"
SEED = 20261201
CLOCK = time.process_time


def _casadi_reference():
    """The independent casadi formulation kept with the tests (tests/test_opf_ipopt.py)."""
    spec = importlib.util.spec_from_file_location("opf_ipopt_reference", ROOT / "tests" / "test_opf_ipopt.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _median(fn, repeats: int):
    out = fn()  # warm-up
    times = []
    for _ in range(repeats):
        t0 = CLOCK()
        out = fn()
        times.append(CLOCK() - t0)
    return statistics.median(times), out


def _ipopt(ref, net, pd=None, qd=None):
    """(status, objective, iterations, solve seconds) of Ipopt; the model is built first."""
    import casadi
    model = ref.build_casadi_opf(net, pd, qd)
    solver = casadi.nlpsol("opf", "ipopt", model["nlp"], {
        "ipopt.print_level": 0, "print_time": False, "ipopt.sb": "yes", "ipopt.tol": 1e-8,
        "ipopt.max_iter": 3000})

    def run():
        return solver(x0=model["x0"], lbx=model["lbx"], ubx=model["ubx"], lbg=model["lbg"], ubg=model["ubg"])
    return solver, run


def per_network(ref, names, repeats: int, with_pandapower: bool) -> list[dict]:
    from pypower.api import ppoption, runopf
    rows = []
    opts = ppoption(VERBOSE=0, OUT_ALL=0)
    for name in names:
        net = load_network(name)
        t0 = CLOCK()
        solver = ACOPF(net)
        setup = CLOCK() - t0
        ours_s, res = _median(solver.solve, repeats)
        ip_solver, ip_run = _ipopt(ref, net)
        ip_s, sol = _median(ip_run, repeats)
        stats = ip_solver.stats()
        ppc = to_ppc(net)
        pp_s, pp = _median(lambda: runopf(ppc, opts), max(1, repeats // 2))
        row = {"network": name, "n_bus": net.n_bus,
               "flowgauge": {"status": res.status, "objective": res.objective, "iterations": res.iterations,
                             "solve_seconds": ours_s, "setup_seconds": setup},
               "ipopt": {"status": stats["return_status"], "objective": float(sol["f"]),
                         "iterations": int(stats["iter_count"]), "solve_seconds": ip_s},
               "pypower_runopf": {"success": bool(pp["success"]), "objective": float(pp["f"]),
                                  "iterations": int(pp["raw"]["output"]["iterations"]), "seconds": pp_s}}
        row["ratio_to_ipopt"] = ours_s / ip_s
        row["speedup_over_pypower"] = pp_s / ours_s
        if with_pandapower:
            import pandapower as pdp
            from pandapower.converter.pypower import from_ppc
            try:
                pnet = from_ppc(ppc, f_hz=60, validate_conversion=False)
                pdp_s, _ = _median(lambda: pdp.runopp(pnet, verbose=False), max(1, repeats // 2))
                row["pandapower_runopp"] = {"objective": float(pnet.res_cost), "seconds": pdp_s}
                row["speedup_over_pandapower"] = pdp_s / ours_s
            except Exception as exc:  # a reference library failing on a case is recorded, not fatal
                row["pandapower_runopp"] = {"error": f"{type(exc).__name__}: {exc}"}
        rows.append(row)
        print(f"{name:8s} ours {ours_s * 1e3:8.1f} ms ({res.iterations} it)  ipopt {ip_s * 1e3:8.1f} ms "
              f"({stats['iter_count']} it)  pypower {pp_s * 1e3:8.1f} ms"
              + (f"  pandapower {row['pandapower_runopp'].get('seconds', float('nan')) * 1e3:8.1f} ms"
                 if with_pandapower else ""),
              flush=True)
    return rows


def _ipopt_status(ref, net, pd, qd) -> str:
    solver, run = _ipopt(ref, net, pd, qd)
    run()
    return solver.stats()["return_status"]


def robustness(ref, names, n_random: int) -> dict:
    out = {"scaled": [], "random": []}
    for name in names:
        net = load_network(name)
        solver = ACOPF(net)
        for k in (0.7, 1.0, 1.1):
            res = solver.solve(net.pd_mw * k, net.qd_mvar * k)
            item = {"network": name, "scale": k, "status": res.status, "iterations": res.iterations}
            if not res.converged:  # is the loading feasible at all? ask Ipopt
                item["ipopt_status"] = _ipopt_status(ref, net, net.pd_mw * k, net.qd_mvar * k)
            out["scaled"].append(item)
    for name in ("ieee57", "ieee118"):
        net = load_network(name)
        solver = ACOPF(net)
        rng = np.random.Generator(np.random.PCG64(SEED))
        counts, ipopt_on_failures, iters = Counter(), Counter(), []
        for _ in range(n_random):
            f = rng.uniform(0.85, 1.15, net.n_load)
            res = solver.solve(net.pd_mw * f, net.qd_mvar * f)
            counts[res.status] += 1
            iters.append(res.iterations)
            if not res.converged:
                ipopt_on_failures[_ipopt_status(ref, net, net.pd_mw * f, net.qd_mvar * f)] += 1
        out["random"].append({"network": name, "loadings": n_random, "factor_range": [0.85, 1.15],
                              "statuses": dict(sorted(counts.items())),
                              "ipopt_on_the_others": dict(sorted(ipopt_on_failures.items())),
                              "median_iterations": float(np.median(iters)), "max_iterations": int(max(iters))})
        print(f"random {name}: {dict(counts)}; Ipopt on the others: {dict(ipopt_on_failures)}", flush=True)
    return out


def loadability(names) -> list[dict]:
    rows = []
    for name in names:
        net = load_network(name)
        t0 = CLOCK()
        lr = max_loadability(net)
        secs = CLOCK() - t0
        solver = ACOPF(net)
        at = solver.solve(lr.pd_mw, lr.qd_mvar).status
        s = 1.0 + 1.01 * lr.lam
        beyond = solver.solve(net.pd_mw * s, net.qd_mvar * s).status
        rows.append({"network": name, "status": lr.status, "lam": lr.lam, "iterations": lr.iterations,
                     "seconds": secs, "opf_at_lam": at, "opf_at_1.01_lam": beyond,
                     "binding_limits": len(lr.binding)})
        print(f"loadability {name}: lam {lr.lam:.6f} ({lr.status}, {lr.iterations} it); at lam {at}, "
              f"at 1.01 lam {beyond}", flush=True)
    return rows


def large(seeds) -> list[dict]:
    rows = []
    for seed in seeds:
        net = synthetic(2000, seed)
        t0 = CLOCK()
        solver = ACOPF(net)
        setup = CLOCK() - t0
        t0 = CLOCK()
        res = solver.solve()
        secs = CLOCK() - t0
        rows.append({"network": f"synthetic(2000, {seed})", "n_bus": net.n_bus, "n_branch": net.n_branch,
                     "status": res.status, "iterations": res.iterations, "solve_seconds": secs,
                     "setup_seconds": setup})
        print(f"synthetic 2000 seed {seed}: {res.status} {res.iterations} it {secs:.2f} s", flush=True)
    return rows


def dc(names, repeats: int) -> list[dict]:
    from pypower.api import ppoption, rundcopf
    rows = []
    opts = ppoption(VERBOSE=0, OUT_ALL=0)
    for name in names:
        net = load_network(name)
        ours_s, res = _median(lambda: solve_dcopf(net), repeats)
        ppc = to_ppc(net)
        pp_s, pp = _median(lambda: rundcopf(ppc, opts), max(1, repeats // 2))
        rows.append({"network": name, "status": res.status, "objective": res.objective,
                     "pypower_objective": float(pp["f"]), "seconds": ours_s, "pypower_seconds": pp_s})
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats and loadings")
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    logging.disable(logging.WARNING)
    ref = _casadi_reference()
    names = bundled_names()
    repeats = 3 if args.quick else 9
    result = {
        "benchmark": "opf", "quick": args.quick, "clock": "process CPU time", "seed": SEED,
        "settings": OPFSettings().to_dict(),
        "environment": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__,
                        "machine": platform.machine()},
        "per_network": per_network(ref, names, repeats, with_pandapower=True),
        "robustness": robustness(ref, names, 20 if args.quick else 200),
        "max_loadability": loadability(names),
        "synthetic_2000": large((0,) if args.quick else (0, 1, 2)),
        "dcopf": dc(names, repeats),
    }
    big = {r["network"]: r for r in result["per_network"]}
    result["targets"] = {
        "ratio_to_ipopt_ieee118": big["ieee118"]["ratio_to_ipopt"],
        "ratio_to_ipopt_ieee300": big["ieee300"]["ratio_to_ipopt"],
        "min_speedup_over_pypower": min(r["speedup_over_pypower"] for r in result["per_network"]),
        "min_speedup_over_pandapower": min(r["speedup_over_pandapower"] for r in result["per_network"]
                                           if "speedup_over_pandapower" in r),
        "synthetic_2000_max_seconds": max(r["solve_seconds"] for r in result["synthetic_2000"]),
    }
    atomic_write_bytes(OUT, canonical_json(result, indent=1))
    print(canonical_json(result["targets"], indent=1).decode())
    return 0


if __name__ == "__main__":
    sys.exit(main())
