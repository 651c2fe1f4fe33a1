"""Scoring speed per network, and the restoration power flow against pandapower's runpp.

For each network: S samples of loads drawn around the base case (uniform +-10 % per load) and
predictions made from the base case's dispatch and voltage setpoints (perturbed +-3 % / +-0.01
p.u.), then the whole scorer core (raw metrics, restoration power flows, limit checks,
aggregation, bootstrap) is timed: samples per second. The reference cost of each sample is the
base dispatch's cost scaled with the total load (the timing does not depend on its value).

In the same run, pandapower's ``runpp`` (Newton-Raphson, same tolerance, reactive limits not
enforced) is timed on the first samples with the same setpoints against our restoration with the
``strict`` profile (no reactive-limit enforcement either), on a pandapower network built once by
:func:`pandapower_net`; the ratio of its median time per sample to ours is the restoration
speed-up. The largest voltage differences to pandapower and to PYPOWER's runpf (first 3 samples)
are recorded.

``pandapower_net`` builds a faithful case: ``from_ppc`` places a transformer's off-nominal tap on
its higher-voltage side, while the case data put it at the branch's from end, so every branch
with a tap whose from bus has the lower base voltage is written reversed first (exact: impedance
times tap squared, charging over tap squared, tap 1/tap, shift negated: the same admittance
matrix); ``runpp`` then runs with ``trafo_model="pi"`` (the case data's model; pandapower's
default "t" model splits the series impedance around the charging). Buses without a base voltage
get 100 kV. Loads with negative active power become static generators in the conversion and are
set there per sample. With this, pandapower's admittance matrix equals ours on ieee300 to 1e-13
(before: voltages up to 0.1 p.u. apart).

Reactive limits (section ``reactive_limits``): per network, the frozen ``test-id`` split's
reference setpoints with realistic error (``vm_pu`` + N(0, 1e-3) p.u., ``pg_mw`` x (1 + N(0,
1e-3))), the restoration timed with the ``strict`` profile and with ``reactive-limits``
(median of --repeat runs, per sample) and their ratio (target at most 1.5); the mean number of
generators held at a reactive limit; pandapower's ``runpp(enforce_q_lims=True)`` timed on the
first --pandapower samples and its ratio to ours (target at least 50), with the number of
samples where pandapower holds the same generators as we do and the largest voltage difference
on those (pandapower never returns a bus to PV, our rule does: docs/powerflow.md).

Scale (``--scale``, section ``scale`` of its own file ``score_scale.json``): the whole scorer core
(``score_arrays``) on --scale-samples synthetic samples of ``activsg2000`` built as above, with
the ``reactive-limits`` profile and with ``strict``, with 1 and 2 local worker processes. Each
run happens in a fresh child process (``--scale-child``), so nothing is cached from an earlier
run; the parent samples the resident memory of the child and of every process under it with
psutil every 20 ms (peak of the sum: the process tree's peak) and the child reports its own
``ru_maxrss`` and the largest one among its worker processes. Wall time is that of
``score_arrays`` alone (inputs built before the clock starts), and its CPU time (user + system,
of the child and its finished workers: what a shared machine's load does not inflate, so CPU
time / 2 estimates the 2-worker wall time on an idle 2-core machine); samples per second and, when
fewer than 10,000 samples ran, the time for 10,000 at the same rate (samples are independent
and solved in fixed chunks, so time grows linearly in the count). Target: 10,000 samples in
at most 60 s with 2 workers and at most 4 GB peak.

State (``--state``, section ``state`` of its own file ``score_state.json``): the same synthetic
samples of --state-network (built as above) scored by ``score_arrays`` three ways, interleaved
over --repeat rounds: on the intact network, with one branch out in every sample (one state: the
grouping's best case) and with a single outage per sample (a branch or a generator, drawn
uniformly from the network's allowed single outages with a seeded generator: many states, a few
samples each, the test-n1 case); samples per second (median) and the ratio of each to the
intact rate, 1 worker, the ``reactive-limits`` profile.

Usage: python benchmarks/score.py [--samples 10000] [--networks ieee14,ieee118] [--pandapower 30] [--quick]
       python benchmarks/score.py --scale [--scale-samples 10000[,N2,...]] [--scale-repeat 1]
       python benchmarks/score.py --scale --scale-against OTHER/src [--scale-repeat 3]
       python benchmarks/score.py --state [--state-network ieee118] [--state-samples 2000] [--repeat 3]
Writes benchmarks/results/score.json (or score_scale.json with --scale, score_scale_against.json
with --scale-against, score_state.json with --state). Medians of --repeat runs.

Against another version (``--scale-against``): the target configuration only, alternating fresh
runs of this code and of the flowgauge source folder given (``git worktree add ../base <commit>``
gives ``../base/src``); both must take the same Newton steps.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import time
import warnings
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np
from numpy.random import PCG64, Generator

from flowgauge import __version__
from flowgauge._io import atomic_write_text
from flowgauge.network import load_network, to_ppc, to_ppc_for_pandapower
from flowgauge import load_split
from flowgauge.scoring import (DEFAULT_PROFILE, REACTIVE_LIMITS_PROFILE, STRICT_PROFILE, generator_cost_per_h,
                               restore, score_arrays)

OUT = Path(__file__).parent / "results" / "score.json"
OUT_SCALE = Path(__file__).parent / "results" / "score_scale.json"
OUT_STATE = Path(__file__).parent / "results" / "score_state.json"
OUT_AGAINST = Path(__file__).parent / "results" / "score_scale_against.json"
SCALE_NETWORK = "activsg2000"
SCALE_TARGET = {"samples": 10000, "workers": 2, "seconds_at_most": 60.0, "peak_memory_bytes_at_most": 4e9}


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

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return from_ppc(to_ppc_for_pandapower(net), f_hz=60, validate_conversion=False)


class PandapowerCase:
    """A pandapower network of ``net`` whose loads and setpoints are set per sample."""

    def __init__(self, net, pd, qd):
        import logging

        logging.getLogger("pandapower").setLevel(logging.ERROR)
        self.net, self.pn = net, pandapower_net(net)
        load = np.zeros((net.n_bus, net.n_load))
        load[net.load_bus_idx, np.arange(net.n_load)] = 1.0
        self.pd_bus, self.qd_bus = pd @ load.T, qd @ load.T  # loads summed per bus, as to_ppc does
        self.load_bus = net.bus_index(self.pn.load.bus.to_numpy())  # pandapower indexes buses by id
        self.sgen_bus = net.bus_index(self.pn.sgen.bus.to_numpy())  # negative loads
        ref_bus = set(net.ref_idx.tolist())
        self.gen_rows = np.array([g for g in range(net.n_gen) if net.gen_bus_idx[g] not in ref_bus])
        self.ext_bus = net.bus_index(self.pn.ext_grid.bus.to_numpy())

    def run(self, k, pg, vm, enforce_q_lims: bool) -> float:
        import pandapower as pp

        pn, net = self.pn, self.net
        pn.load["p_mw"] = self.pd_bus[k, self.load_bus]
        pn.load["q_mvar"] = self.qd_bus[k, self.load_bus]
        pn.sgen["p_mw"] = -self.pd_bus[k, self.sgen_bus]
        pn.sgen["q_mvar"] = -self.qd_bus[k, self.sgen_bus]
        pn.gen["p_mw"] = pg[k, self.gen_rows]
        pn.gen["vm_pu"] = vm[k, net.gen_bus_idx[self.gen_rows]]
        pn.ext_grid["vm_pu"] = vm[k, self.ext_bus]
        t0 = time.perf_counter()
        pp.runpp(pn, algorithm="nr", tolerance_mva=1e-8 * net.base_mva, max_iteration=20,
                 enforce_q_lims=enforce_q_lims, init="dc", calculate_voltage_angles=True, numba=False,
                 trafo_model="pi")
        return time.perf_counter() - t0

    def vm_pu(self) -> np.ndarray:
        return self.pn.res_bus.vm_pu.loc[self.net.bus_id].to_numpy()

    def held(self) -> np.ndarray:
        """+1 / -1 per non-reference generator that pandapower holds at its maximum / minimum."""
        q = self.pn.res_gen.q_mvar.to_numpy()
        hi = np.abs(q - self.pn.gen.max_q_mvar.to_numpy()) < 1e-6
        lo = np.abs(q - self.pn.gen.min_q_mvar.to_numpy()) < 1e-6
        return np.where(hi, 1, np.where(lo, -1, 0))


def time_restoration(net, samples: int, pp_samples: int, seed: int) -> dict:
    pd, qd, pg, vm, _ = inputs(net, samples, seed)
    t0 = time.perf_counter()
    ours = restore(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, vm_pu=vm, profile=STRICT_PROFILE)
    ours_per = (time.perf_counter() - t0) / samples

    case = PandapowerCase(net, pd, qd)
    per, dv = [], 0.0
    for k in range(pp_samples):
        per.append(case.run(k, pg, vm, enforce_q_lims=False))
        if ours.converged[k]:
            dv = max(dv, float(np.abs(case.vm_pu() - ours.vm_pu[k]).max()))
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


def split_inputs(name: str, seed: int, samples: int | None = None):
    """The frozen test-id split's references with realistic error: vm + N(0, 1e-3) p.u. at every
    bus (only generator and reference buses are setpoints), pg x (1 + N(0, 1e-3))."""
    split = load_split(name, "test-id")
    n = split.n_samples if samples is None else min(samples, split.n_samples)
    rng = Generator(PCG64(seed))
    vm = split.references.vm_pu[:n] + rng.normal(0.0, 1e-3, (n, split.network.n_bus))
    pg = split.references.pg_mw[:n] * (1.0 + rng.normal(0.0, 1e-3, (n, split.network.n_gen)))
    return split.network, split.pd_mw[:n], split.qd_mvar[:n], pg, vm


def time_reactive_limits(name: str, repeat: int, pp_samples: int, seed: int, samples: int | None) -> dict:
    net, pd, qd, pg, vm = split_inputs(name, seed, samples)
    n = pd.shape[0]
    out = {"samples": n}
    for profile in (STRICT_PROFILE, REACTIVE_LIMITS_PROFILE):
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            res = restore(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, vm_pu=vm, profile=profile)
            times.append(time.perf_counter() - t0)
        out[profile.name] = {"seconds_per_sample_median": statistics.median(times) / n,
                             "converged_share": float(res.converged.mean()),
                             "failure_rate": float(res.failed.mean())}
    ours = res
    out["ratio_reactive_limits_to_strict"] = (out["reactive-limits"]["seconds_per_sample_median"]
                                              / out["strict"]["seconds_per_sample_median"])
    out["switched_generators_mean"] = float(np.mean(ours.switched_generators[ours.converged]))
    out["samples_with_a_switch_share"] = float(np.mean(ours.switched_generators[ours.converged] > 0))
    # pandapower on the same setpoints, one sample at a time
    from flowgauge.powerflow import solve_powerflow_batch

    m = min(pp_samples, n)
    held = solve_powerflow_batch(net, pd_mw=pd[:m], qd_mvar=qd[:m], pg_mw=pg[:m], vm_pu=vm[:m], init="dc",
                                 enforce_q_limits=True)
    case = PandapowerCase(net, pd, qd)
    per, same, dv = [], 0, 0.0
    for k in range(m):
        per.append(case.run(k, pg, vm, enforce_q_lims=True))
        if held.converged[k] and np.array_equal(case.held(), held.at_q_limit[k, case.gen_rows]):
            same += 1
            dv = max(dv, float(np.abs(case.vm_pu() - held.vm_pu[k]).max()))
    pp_per = statistics.median(per)
    out["pandapower"] = {"samples": m, "seconds_per_sample_median": pp_per,
                         "speedup": pp_per / out["reactive-limits"]["seconds_per_sample_median"],
                         "samples_with_same_held_generators": same,
                         "max_vm_difference_on_those_pu": dv}
    return out


def scale_child(network: str, samples: int, seed: int, profile: str, workers: int) -> None:
    """One scale run in this process; prints one JSON line (run by :func:`scale_run`)."""
    net = load_network(network)
    pd, qd, pg, vm, ref = inputs(net, samples, seed)
    def cpu():  # user + system time of this process and of its finished children (the workers)
        a, b = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
        return a.ru_utime + a.ru_stime + b.ru_utime + b.ru_stime

    c0, t0 = cpu(), time.perf_counter()
    agg, table = score_arrays(net, sample_id=np.arange(samples), pd_mw=pd, qd_mvar=qd, reference_cost_per_h=ref,
                              pg_mw=pg, vm_pu=vm, profile=profile, workers=workers)
    seconds, cpu_seconds = time.perf_counter() - t0, cpu() - c0
    kib = 1024  # ru_maxrss is in KiB on Linux
    print(json.dumps({
        "seconds": seconds,
        "cpu_seconds": cpu_seconds,
        "self_maxrss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * kib,
        "largest_worker_maxrss_bytes": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * kib,
        "restoration_failure_rate": agg["restoration_failure_rate"],
        "diverged_share": agg["restoration_failure_causes"]["diverged"],
        "iterations_mean": float(table["restoration_iterations"].mean()),
    }), flush=True)


def scale_run(network: str, samples: int, seed: int, profile: str, workers: int, src: str | None = None) -> dict:
    """Run :func:`scale_child` in a fresh process and sample the memory of its process tree.
    With ``src``, the child imports flowgauge from that source folder (another version)."""
    import psutil

    cmd = [sys.executable, str(Path(__file__).resolve()), "--scale-child", network, str(samples), str(seed),
           profile, str(workers)]
    env = None if src is None else dict(os.environ, PYTHONPATH=str(Path(src).resolve()))
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True, env=env)
    root = psutil.Process(proc.pid)
    peak, peak_procs = 0, 0
    while proc.poll() is None:
        try:
            tree = [root] + root.children(recursive=True)
        except psutil.NoSuchProcess:
            break
        total = 0
        for q in tree:
            try:
                total += q.memory_info().rss
            except psutil.NoSuchProcess:
                pass
        if total > peak:
            peak, peak_procs = total, len(tree)
        time.sleep(0.02)
    out, _ = proc.communicate()
    if proc.returncode != 0:
        raise SystemExit(f"scale run {cmd} failed with exit code {proc.returncode}")
    got = json.loads(out.strip().splitlines()[-1])
    got.update({"tree_peak_rss_bytes": peak, "processes_at_peak": peak_procs})
    return got


def time_scale(samples: int, repeat: int, seed: int, extra: tuple[int, ...] = ()) -> dict:
    out = {"network": SCALE_NETWORK, "samples": samples, "repeat": repeat, "runs": {}}
    for profile in (REACTIVE_LIMITS_PROFILE.name, STRICT_PROFILE.name):
        for workers in (1, 2):
            runs = [scale_run(SCALE_NETWORK, samples, seed, profile, workers) for _ in range(repeat)]
            med = statistics.median(r["seconds"] for r in runs)
            rate = samples / med
            row = {"profile": profile, "workers": workers, "seconds": [r["seconds"] for r in runs],
                   "seconds_median": med, "samples_per_second": rate,
                   "seconds_for_10000_samples": SCALE_TARGET["samples"] / rate,
                   "cpu_seconds_per_sample_median": statistics.median(r["cpu_seconds"] for r in runs) / samples,
                   "tree_peak_rss_bytes_max": max(r["tree_peak_rss_bytes"] for r in runs),
                   "processes_at_peak": runs[0]["processes_at_peak"],
                   "self_maxrss_bytes_max": max(r["self_maxrss_bytes"] for r in runs),
                   "largest_worker_maxrss_bytes_max": max(r["largest_worker_maxrss_bytes"] for r in runs),
                   "restoration_failure_rate": runs[0]["restoration_failure_rate"],
                   "diverged_share": runs[0]["diverged_share"],
                   "iterations_mean": runs[0]["iterations_mean"]}
            out["runs"][f"{profile}/workers={workers}"] = row
            print("scale", profile, workers, json.dumps(row), flush=True)
    rl = out["runs"][f"{REACTIVE_LIMITS_PROFILE.name}/workers=2"]
    # more sample counts for the target configuration: time and memory against the count
    curve = [(samples, rl["seconds_median"], rl["tree_peak_rss_bytes_max"])]
    for more in extra:
        r = scale_run(SCALE_NETWORK, more, seed, REACTIVE_LIMITS_PROFILE.name, 2)
        curve.append((more, r["seconds"], r["tree_peak_rss_bytes"]))
        out.setdefault("target_configuration_cpu_seconds_per_sample", []).append(
            {"samples": more, "cpu_seconds_per_sample": r["cpu_seconds"] / more})
        print("scale curve", more, json.dumps(r), flush=True)
    out["target_configuration_by_samples"] = [{"samples": c, "seconds": t, "tree_peak_rss_bytes": m}
                                              for c, t, m in curve]
    if len(curve) > 1:  # straight line through the points (least squares), evaluated at 10,000
        c = np.array([x[0] for x in curve], float)
        out["extrapolated_to_10000_samples"] = {
            "seconds": float(np.polyval(np.polyfit(c, [x[1] for x in curve], 1), SCALE_TARGET["samples"])),
            "tree_peak_rss_bytes": float(np.polyval(np.polyfit(c, [x[2] for x in curve], 1),
                                                    SCALE_TARGET["samples"])),
            "note": "linear fit over the sample counts above; not measured at 10,000"}
    # on an idle machine the 2 workers would split the process tree's CPU time between 2 cores
    out["idle_machine_estimate_seconds_for_10000_samples_2_workers"] = (
        rl["cpu_seconds_per_sample_median"] * SCALE_TARGET["samples"] / 2)
    out["target"] = dict(SCALE_TARGET)
    out["seconds_for_10000_samples_to_target_ratio"] = rl["seconds_for_10000_samples"] / SCALE_TARGET["seconds_at_most"]
    peak = out.get("extrapolated_to_10000_samples", {}).get("tree_peak_rss_bytes", rl["tree_peak_rss_bytes_max"])
    out["peak_memory_to_target_ratio"] = peak / SCALE_TARGET["peak_memory_bytes_at_most"]
    # the samples that peak was measured (or extrapolated) at: a peak below 10,000 samples is not the target's
    out["peak_memory_at_samples"] = SCALE_TARGET["samples"] if "extrapolated_to_10000_samples" in out else samples
    out["met"] = bool(out["seconds_for_10000_samples_to_target_ratio"] <= 1.0 and out["peak_memory_to_target_ratio"] <= 1.0
                      and samples >= SCALE_TARGET["samples"])
    out["reactive_limits_to_strict_ratio"] = {
        f"workers={w}": out["runs"][f"{REACTIVE_LIMITS_PROFILE.name}/workers={w}"]["seconds_median"]
        / out["runs"][f"{STRICT_PROFILE.name}/workers={w}"]["seconds_median"] for w in (1, 2)}
    return out


def main_scale(args) -> None:
    t_start = time.perf_counter()
    counts = [int(x) for x in str(args.scale_samples).split(",")]
    res = time_scale(counts[0], args.scale_repeat, args.seed, tuple(counts[1:]))
    doc = {"benchmark": "score", "section": "scale", "flowgauge_version": __version__,
           "python": platform.python_version(), "machine": platform.machine(), "cpus": os.cpu_count(),
           "seconds_total": time.perf_counter() - t_start, "load_average": list(os.getloadavg()), "scale": res}
    OUT_SCALE.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(OUT_SCALE, json.dumps(doc, indent=1, sort_keys=True) + "\n")
    print(f"wrote {OUT_SCALE}")


def main_scale_against(args) -> None:
    """The target configuration (reactive-limits, 2 workers) with this code and with the code in
    ``--scale-against`` (a ``src`` folder of another version, e.g. from ``git worktree add``),
    alternating, ``--scale-repeat`` fresh runs each: the ratio of their medians is measured on
    the same machine in the same period, which a shared machine's drift does not bias."""
    t_start = time.perf_counter()
    samples = int(str(args.scale_samples).split(",")[0])
    runs = {"this": [], "other": []}
    for _ in range(args.scale_repeat):  # alternate: any drift of the machine hits both alike
        for which, src in (("other", args.scale_against), ("this", None)):
            r = scale_run(SCALE_NETWORK, samples, args.seed, REACTIVE_LIMITS_PROFILE.name, 2, src)
            runs[which].append(r)
            print("against", which, json.dumps({k: r[k] for k in ("seconds", "tree_peak_rss_bytes")}), flush=True)
    med = {k: statistics.median(r["seconds"] for r in v) for k, v in runs.items()}
    if any(runs["this"][i]["iterations_mean"] != runs["other"][i]["iterations_mean"] for i in range(args.scale_repeat)):
        raise SystemExit("the two versions took different Newton steps: not the same work")
    doc = {"benchmark": "score", "section": "scale against another version", "flowgauge_version": __version__,
           "python": platform.python_version(), "machine": platform.machine(), "cpus": os.cpu_count(),
           "network": SCALE_NETWORK, "samples": samples, "profile": REACTIVE_LIMITS_PROFILE.name, "workers": 2,
           "other_src": str(args.scale_against), "repeat": args.scale_repeat,
           "seconds_this": [r["seconds"] for r in runs["this"]], "seconds_other": [r["seconds"] for r in runs["other"]],
           "seconds_median_this": med["this"], "seconds_median_other": med["other"],
           "speedup_of_medians": med["other"] / med["this"],
           "tree_peak_rss_bytes_this": max(r["tree_peak_rss_bytes"] for r in runs["this"]),
           "tree_peak_rss_bytes_other": max(r["tree_peak_rss_bytes"] for r in runs["other"]),
           "seconds_total": time.perf_counter() - t_start, "load_average": list(os.getloadavg())}
    OUT_AGAINST.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(OUT_AGAINST, json.dumps(doc, indent=1, sort_keys=True) + "\n")
    print(f"wrote {OUT_AGAINST}")


def state_flags(net, samples: int, seed: int):
    """(one branch out everywhere, one single outage per sample): each a pair of flags (S, n_branch),
    (S, n_gen), and the outage kinds drawn."""
    from flowgauge.network import single_outages
    outages = single_outages(net)
    br0 = np.broadcast_to(np.asarray(net.in_service, bool), (samples, net.n_branch)).copy()
    gen0 = np.ones((samples, net.n_gen), bool)
    shared_br = br0.copy()
    shared_br[:, outages.branches[outages.branches.size // 2]] = False
    choices = np.r_[outages.branches, net.n_branch + outages.generators]
    pick = Generator(PCG64(seed)).choice(choices, samples)
    each_br, each_gen = br0.copy(), gen0.copy()
    rows = np.arange(samples)
    is_br = pick < net.n_branch
    each_br[rows[is_br], pick[is_br]] = False
    each_gen[rows[~is_br], pick[~is_br] - net.n_branch] = False
    return {"one branch out": (shared_br, gen0), "single outage per sample": (each_br, each_gen)}, \
        {"branches_allowed": int(outages.branches.size), "generators_allowed": int(outages.generators.size),
         "samples_with_branch_out": int(is_br.sum()), "samples_with_generator_out": int((~is_br).sum())}


def time_state(name: str, samples: int, repeat: int, seed: int) -> dict:
    from flowgauge.network import group_states
    net = load_network(name)
    pd, qd, pg, vm, ref = inputs(net, samples, seed)
    sid = np.arange(samples)
    cases, drawn = state_flags(net, samples, seed)
    runs = {"intact": {}, **{k: {"branch_in_service": b, "gen_in_service": g} for k, (b, g) in cases.items()}}
    times = {k: [] for k in runs}
    failure = {}
    for _ in range(repeat):  # interleaved: the machine's load falls on every case alike
        for k, extra in runs.items():
            t0 = time.perf_counter()
            agg, _ = score_arrays(net, sample_id=sid, pd_mw=pd, qd_mvar=qd, reference_cost_per_h=ref, pg_mw=pg,
                                  vm_pu=vm, profile=REACTIVE_LIMITS_PROFILE, workers=1, **extra)
            times[k].append(time.perf_counter() - t0)
            failure[k] = agg["restoration_failure_causes"]["diverged"]
    out = {"network": name, "samples": samples, "repeat": repeat, "profile": REACTIVE_LIMITS_PROFILE.name,
           "workers": 1, "outages_drawn": drawn, "runs": {}}
    base = samples / statistics.median(times["intact"])
    for k in runs:
        med = statistics.median(times[k])
        states = 1 if k == "intact" else int(group_states(*cases[k])[0].shape[0])
        out["runs"][k] = {"seconds_median": med, "seconds": times[k], "samples_per_second": samples / med,
                          "ratio_to_intact": (samples / med) / base, "distinct_states": states,
                          "diverged_share": failure[k]}
    return out


def main_state(args) -> None:
    t_start = time.perf_counter()
    res = time_state(args.state_network, args.state_samples, args.repeat, args.seed)
    doc = {"benchmark": "score", "section": "state", "flowgauge_version": __version__,
           "python": platform.python_version(), "machine": platform.machine(), "cpus": os.cpu_count(),
           "quick": args.quick, "seconds_total": time.perf_counter() - t_start,
           "load_average": list(os.getloadavg()), "state": res}
    OUT_STATE.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(OUT_STATE, json.dumps(doc, indent=1, sort_keys=True) + "\n")
    print(json.dumps(res["runs"], indent=1))
    print(f"wrote {OUT_STATE}")


def main() -> None:
    if len(sys.argv) == 7 and sys.argv[1] == "--scale-child":
        net_name, n, seed, prof, workers = sys.argv[2:]
        scale_child(net_name, int(n), int(seed), prof, int(workers))
        return
    ap = argparse.ArgumentParser()
    ap.add_argument("--samples", type=int, default=10000)
    ap.add_argument("--networks", default="ieee14,ieee30,ieee57,ieee118,ieee300")
    ap.add_argument("--pandapower", type=int, default=30, help="samples timed with pandapower")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--quick", action="store_true", help="1000 samples, 10 with pandapower, 1 repeat")
    ap.add_argument("--scale", action="store_true", help=f"only the scale section ({SCALE_NETWORK}), into "
                                                          f"{OUT_SCALE.name}")
    ap.add_argument("--scale-samples", default="10000",
                    help="sample count of every scale run; more counts after commas are run only with "
                         "reactive-limits and 2 workers (time and memory against the count)")
    ap.add_argument("--scale-repeat", type=int, default=1, help="fresh runs per configuration (median)")
    ap.add_argument("--scale-against", default=None, metavar="SRC",
                    help="with --scale: only the target configuration, this code against the flowgauge "
                         f"source folder SRC (another version), alternating, into {OUT_AGAINST.name}")
    ap.add_argument("--state", action="store_true", help=f"only the state section, into {OUT_STATE.name}")
    ap.add_argument("--state-network", default="ieee118")
    ap.add_argument("--state-samples", type=int, default=2000)
    args = ap.parse_args()
    if args.state:
        if args.quick:
            args.state_samples, args.repeat = 256, 1
        main_state(args)
        return
    if args.scale:
        if args.quick:
            args.scale_samples = "512"
        if args.scale_against:
            main_scale_against(args)
        else:
            main_scale(args)
        return
    if args.quick:
        args.samples, args.pandapower, args.repeat = 1000, 10, 1
    results = {}
    t_start = time.perf_counter()
    for name in args.networks.split(","):
        net = load_network(name)
        results[name] = {"scoring": time_scoring(net, args.samples, args.repeat, args.seed, 1),
                         "scoring_2_workers": time_scoring(net, args.samples, args.repeat, args.seed, 2),
                         "restoration": time_restoration(net, min(args.samples, 1000), args.pandapower, args.seed)}
        if name != "demo":
            results[name]["reactive_limits"] = time_reactive_limits(name, args.repeat, args.pandapower, args.seed,
                                                                    200 if args.quick else None)
        print(name, json.dumps(results[name]), flush=True)
    doc = {"benchmark": "score", "flowgauge_version": __version__, "python": platform.python_version(),
           "machine": platform.machine(), "cpus": os.cpu_count(), "samples": args.samples,
           "targets": {"ieee118_10000_samples_seconds": 10.0, "restoration_speedup_vs_pandapower": 50.0,
                       "reactive_limits_to_strict_ratio_at_most": 1.5,
                       "reactive_limits_speedup_vs_pandapower_at_least": 50.0},
           "scoring_profile": DEFAULT_PROFILE.name, "restoration_profile": STRICT_PROFILE.name,
           "quick": args.quick, "seconds_total": time.perf_counter() - t_start,
           "load_average": list(os.getloadavg()), "networks": results}
    OUT.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(OUT, json.dumps(doc, indent=1, sort_keys=True) + "\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
