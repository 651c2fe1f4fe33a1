"""Split-building throughput of the split designs, and how many binding-limit regimes they find.

    python benchmarks/splits.py [--quick] [--out benchmarks/results/splits.json]

Rates: samples per second kept, for the ``spanning`` design (split ``train``), the ``outside``
design (``test-ood``, built beside that train split) and the ``edge`` design (``test-edge``),
with 1 and 2 local workers, per network. Rejected draws cost time too and are included. The
spanning design solves a pilot of plain draws once per network and process (shared by every
split of the network); its time is reported apart (``pilot_seconds``) and is not in the rates.
The reference, run in the same process: PYPOWER's runopf on the first 10 kept loadings of each
1-worker build (it solves only the final AC optimal power flow, not the loadability solves the
designs also need), as the ratio of our 1-worker rate to its rate.

Regimes against samples: distinct binding-limit regimes among the first n samples of one
spanning ``train`` build on ieee14 and ieee30, and the same for the narrow level-local design
(``train-local``, the design of the earlier train split), built in the same run as the
reference; ``ratio`` = spanning / level-local regimes at each n.

Quick mode: few samples on demo, ieee14, ieee30, ieee57, ieee118; the regime curves up to 500
samples. Full mode adds ieee300, more samples, regime curves up to 2,000 samples.

Executors (``--executors``, written to ``benchmarks/results/splits_executors.json`` instead):
build throughput of one split on each executor, the median of several timed builds each: in
this process (serial), the local process pool with 2 workers, and a Dask ``LocalCluster`` of 1
and of 2 worker processes (one thread each) reached through ``--scheduler``. Builds run in
rounds, one per executor, interleaved, so that the machine's changing load touches all alike;
one round builds one seed everywhere and records whether the identity hashes agree. The
spanning design's pilot is fitted once before timing; the Dask clusters are started and warmed
up (a small untimed build: imports, solver set-up on each worker) before the rounds, since a
long build pays that once; the local pool starts afresh in every build, as it does in use.
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np

from flowgauge import __version__
from flowgauge._io import atomic_write_bytes, canonical_json
from flowgauge.errors import InputError
from flowgauge.splits import build_split, load_split

QUICK = {"networks": ["demo", "ieee14", "ieee30", "ieee57", "ieee118"],
         "samples": {"train": 16, "test-ood": 12, "test-edge": 8},
         "regime_networks": ["ieee14", "ieee30"], "regime_counts": [100, 200, 500]}
FULL = {"networks": ["demo", "ieee14", "ieee30", "ieee57", "ieee118", "ieee300"],
        "samples": {"train": 24, "test-ood": 18, "test-edge": 12},
        "regime_networks": ["ieee14", "ieee30"], "regime_counts": [100, 200, 500, 1000, 2000]}
DESIGN_OF = {"train": "spanning", "test-ood": "outside", "test-edge": "edge", "train-local": "level-local"}


def _build(network: str, split: str, n: int, workers: int, out: Path, train=None) -> tuple[float, dict]:
    t0 = time.perf_counter()
    m = build_split(network, split, samples=n, seed=7, out=out, workers=workers, chunk=max(1, n // 8),
                    train=train)
    return time.perf_counter() - t0, m


def _pilot_seconds(network: str) -> float:
    """Time to fit the spanning design (its pilot solves) on this network, once per process."""
    from flowgauge.network import load_network
    from flowgauge.splits._designs import design_for
    t0 = time.perf_counter()
    design_for("train", load_network(network))
    return time.perf_counter() - t0


def _pypower_rate(folder: Path, limit: int = 10) -> float:
    from pypower.api import ppoption, runopf

    from flowgauge.network import to_ppc
    s = load_split(folder)
    opt = ppoption(VERBOSE=0, OUT_ALL=0)
    n = min(limit, s.n_samples)
    t0 = time.perf_counter()
    for i in range(n):
        runopf(to_ppc(s.network, s.pd_mw[i], s.qd_mvar[i]), opt)
    return n / (time.perf_counter() - t0)


def _rate_rows(network: str, samples: dict, tmp: Path) -> tuple[list[dict], float]:
    pilot = _pilot_seconds(network)
    rows = []
    base = tmp / network
    for split, n in samples.items():
        row = {"network": network, "split": split, "design": DESIGN_OF[split], "samples": n}
        try:
            for workers in (1, 2):
                out = base / f"w{workers}" / split
                train = base / f"w{workers}" / "train" if split == "test-ood" else None
                dt, m = _build(network, split, n, workers, out, train)
                row[f"samples_per_s_{workers}_worker{'s' if workers > 1 else ''}"] = n / dt
                row[f"rejected_draws_{workers}"] = int(sum(m["rejected"].values()))
                row[f"regimes_{workers}"] = int(m["coverage"]["regimes"])
                if workers == 1:
                    row["pypower_runopf_per_s"] = _pypower_rate(out)
                    row["kinds"] = m["coverage"].get("kinds")
        except InputError as exc:  # a design that finds no feasible draw: recorded, not fatal
            row["error"] = f"{exc.where}: {exc.message}"
            rows.append(row)
            print(f"{network:8s} {split:9s} failed: {row['error']}", flush=True)
            continue
        row["speedup_2_workers"] = row["samples_per_s_2_workers"] / row["samples_per_s_1_worker"]
        row["ratio_to_pypower_1_worker"] = row["samples_per_s_1_worker"] / row["pypower_runopf_per_s"]
        rows.append(row)
        print(f"{network:8s} {split:9s} {row['samples_per_s_1_worker']:7.2f}/s 1w "
              f"{row['samples_per_s_2_workers']:7.2f}/s 2w  x{row['speedup_2_workers']:.2f}  "
              f"pypower {row['pypower_runopf_per_s']:6.2f}/s  regimes {row['regimes_1']}", flush=True)
    return rows, pilot


def _regime_curve(network: str, counts: list[int], tmp: Path, workers: int) -> dict:
    n = max(counts)
    out = {"network": network, "samples": counts}
    for split in ("train", "train-local"):
        folder = tmp / f"curve-{network}-{split}"
        dt, m = _build(network, split, n, workers, folder)
        sig = load_split(folder).references.signature.astype(str)
        out[DESIGN_OF[split]] = {"regimes": [int(np.unique(sig[:c]).size) for c in counts],
                                 "seconds": dt, "samples_per_s": n / dt,
                                 "discovery_last_block": int(m["coverage"]["discovery"][-1]),
                                 "rejected_draws": int(sum(m["rejected"].values()))}
    out["ratio"] = [a / b for a, b in zip(out["spanning"]["regimes"], out["level-local"]["regimes"])]
    print(f"{network:8s} regimes at {counts}: spanning {out['spanning']['regimes']}, "
          f"level-local {out['level-local']['regimes']}", flush=True)
    return out


def _load_times(repeats: int = 5) -> dict | None:
    """Median seconds to load the largest frozen split, against pandas reading the same files."""
    import pandas as pd

    from flowgauge.splits import list_splits
    frozen = list_splits()
    if not frozen:
        return None
    biggest = max(frozen, key=lambda p: sum(f.stat().st_size for f in p.glob("*.parquet")))
    ours, ref = [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        load_split(biggest)
        ours.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        pd.read_parquet(biggest / "inputs.parquet")
        pd.read_parquet(biggest / "references.parquet")
        ref.append(time.perf_counter() - t0)
    return {"split": f"{biggest.parent.name}/{biggest.name}", "load_split_seconds": statistics.median(ours),
            "pandas_read_parquet_seconds": statistics.median(ref),
            "ratio_to_pandas": statistics.median(ours) / statistics.median(ref)}


EXECUTORS = {"quick": {"network": "ieee14", "split": "train", "samples": 40, "chunk": 4, "repeats": 3},
             "full": {"network": "ieee118", "split": "train", "samples": 40, "chunk": 4, "repeats": 5}}


def _timed_build(tmp: Path, name: str, plan: dict, seed: int, **kw) -> tuple[float, str]:
    t0 = time.perf_counter()
    m = build_split(plan["network"], plan["split"], samples=plan["samples"], seed=seed, chunk=plan["chunk"],
                    out=tmp / f"{name}-{seed}" / plan["split"], **kw)
    return plan["samples"] / (time.perf_counter() - t0), m["identity_hash"]


def _executor_rates(plan: dict, tmp: Path) -> dict:
    """Rounds of one build per executor, interleaved so that a change in the machine's load
    touches every executor alike; round r builds seed 100 + r everywhere, so the identity
    hashes of one round must agree."""
    from contextlib import ExitStack

    from dask.distributed import LocalCluster
    _pilot_seconds(plan["network"])  # fit the design once, outside the timings
    runs = {"serial": {"workers": 1}, "local_pool_2_workers": {"workers": 2}}
    with ExitStack() as stack:
        for n in (1, 2):
            cluster = stack.enter_context(LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                                       host="127.0.0.1", dashboard_address=None))
            name = f"dask_{n}_worker{'s' if n > 1 else ''}"
            runs[name] = {"scheduler": cluster.scheduler_address}
            # warm-up: imports and the solver's set-up on every worker, paid once by a long build
            _timed_build(tmp, f"{name}-warm", dict(plan, samples=2 * n * plan["chunk"]), 99, **runs[name])
        rates = {name: [] for name in runs}
        same = []
        for r in range(plan["repeats"]):
            idents = set()
            for name, kw in runs.items():
                rate, ident = _timed_build(tmp, name, plan, 100 + r, **kw)
                rates[name].append(rate)
                idents.add(ident)
            same.append(len(idents) == 1)
            print(f"round {r}: " + ", ".join(f"{k} {v[-1]:.2f}/s" for k, v in rates.items())
                  + f"; identity hashes agree: {same[-1]}", flush=True)
    med = {k: statistics.median(v) for k, v in rates.items()}
    return {**plan, "samples_per_s": rates, "median_samples_per_s": med,
            "ratio_to_serial": {k: v / med["serial"] for k, v in med.items()},
            "identity_hashes_agree_per_round": same}


def _main_executors(args) -> int:
    plan = EXECUTORS["quick" if args.quick else "full"]
    out_path = args.out or str(Path(__file__).parent / "results" / "splits_executors.json")
    t_start = time.perf_counter()
    load_before = os.getloadavg()[0]
    with tempfile.TemporaryDirectory(prefix="fg-bench-executors-") as tmpdir:
        rates = _executor_rates(plan, Path(tmpdir))
    result = {"benchmark": "splits-executors", "flowgauge_version": __version__, "quick": args.quick,
              "cpu_count": os.cpu_count(), "python": platform.python_version(), "numpy": np.__version__,
              "load_average_1min_start": load_before, "load_average_1min_end": os.getloadavg()[0],
              "wall_seconds": time.perf_counter() - t_start, "executors": rates,
              "note": "samples/s kept (rejected draws' time included), median of the interleaved rounds; Dask "
                      "clusters warmed up before timing, the local pool started in every build. The machine is "
                      "shared with other work (see the load averages): compare ratios from the same run."}
    atomic_write_bytes(out_path, canonical_json(result, indent=1))
    print(f"wrote {out_path} in {result['wall_seconds']:.0f} s", flush=True)
    return 0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--executors", action="store_true",
                    help="only the executor comparison (serial, local pool, Dask 1 and 2 workers)")
    ap.add_argument("--out", default=None)
    args = ap.parse_args(argv)
    if args.executors:
        return _main_executors(args)
    args.out = args.out or str(Path(__file__).parent / "results" / "splits.json")
    plan = QUICK if args.quick else FULL
    t_start = time.perf_counter()
    load_before = os.getloadavg()[0]
    rows, pilots, curves = [], {}, []
    with tempfile.TemporaryDirectory(prefix="fg-bench-splits-") as tmpdir:
        tmp = Path(tmpdir)
        for network in plan["networks"]:
            r, pilots[network] = _rate_rows(network, plan["samples"], tmp)
            rows += r
        for network in plan["regime_networks"]:
            curves.append(_regime_curve(network, plan["regime_counts"], tmp, workers=2))
    loading = _load_times()
    result = {"benchmark": "splits", "flowgauge_version": __version__, "quick": args.quick,
              "cpu_count": os.cpu_count(), "python": platform.python_version(), "numpy": np.__version__,
              "load_average_1min_start": load_before, "load_average_1min_end": os.getloadavg()[0],
              "wall_seconds": time.perf_counter() - t_start,
              "rows": rows, "pilot_seconds": pilots, "regimes_against_samples": curves,
              "load_largest_frozen_split": loading,
              "note": "samples/s counts kept samples; the time of rejected draws is included, the "
                      "spanning design's pilot (once per network and process) is not: pilot_seconds. "
                      "The machine is shared with other work (see the load averages): compare ratios "
                      "measured in the same run, not absolute rates."}
    atomic_write_bytes(args.out, canonical_json(result, indent=1))
    print(f"wrote {args.out} in {result['wall_seconds']:.0f} s", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
