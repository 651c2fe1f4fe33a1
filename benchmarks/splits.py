"""Split-building throughput: samples per second for each split type per network, with 1 and 2
local workers, against PYPOWER's runopf solving the same loadings in the same run.

    python benchmarks/splits.py [--quick] [--out benchmarks/results/splits.json]

Reported: samples/s kept (rejected draws cost time too), the 2-worker speed-up, and the ratio
of our 1-worker rate to PYPOWER's runopf rate on the first 10 kept loadings (the reference;
higher is better; for the edge split PYPOWER solves only the final AC-OPF, not the loadability).
Also the time to load the largest frozen split against pandas reading the same files.
Median of --repeats runs.
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

import numpy as np

from flowgauge import __version__
from flowgauge._io import atomic_write_bytes, canonical_json
from flowgauge.splits import build_split, load_split

QUICK = {"networks": ["ieee14", "ieee118"], "samples": {"test-id": 20, "test-ood": 20, "test-edge": 8, "train": 20}}
FULL = {"networks": ["demo", "ieee14", "ieee30", "ieee57", "ieee118", "ieee300"],
        "samples": {"test-id": 60, "test-ood": 60, "test-edge": 20, "train": 60}}


def _build_rate(network: str, split: str, n: int, workers: int, tmp: Path) -> tuple[float, Path, int]:
    out = tmp / f"{network}-{split}-{workers}-{time.perf_counter_ns()}"
    t0 = time.perf_counter()
    m = build_split(network, split, samples=n, seed=7, out=out, workers=workers, chunk=max(1, n // 8))
    dt = time.perf_counter() - t0
    return n / dt, out, sum(m["rejected"].values())


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


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--out", default=str(Path(__file__).parent / "results" / "splits.json"))
    args = ap.parse_args(argv)
    plan = QUICK if args.quick else FULL
    rows = []
    with tempfile.TemporaryDirectory(prefix="fg-bench-splits-") as tmpdir:
        tmp = Path(tmpdir)
        for network in plan["networks"]:
            for split, n in plan["samples"].items():
                r1, r2, ref, rej = [], [], [], 0
                for _ in range(args.repeats):
                    rate, folder, rej = _build_rate(network, split, n, 1, tmp)
                    r1.append(rate)
                    r2.append(_build_rate(network, split, n, 2, tmp)[0])
                    ref.append(_pypower_rate(folder))
                row = {"network": network, "split": split, "samples": n, "rejected_draws": rej,
                       "samples_per_s_1_worker": statistics.median(r1),
                       "samples_per_s_2_workers": statistics.median(r2),
                       "speedup_2_workers": statistics.median(r2) / statistics.median(r1),
                       "pypower_runopf_per_s": statistics.median(ref),
                       "ratio_to_pypower_1_worker": statistics.median(r1) / statistics.median(ref)}
                rows.append(row)
                print(f"{network:8s} {split:9s} {row['samples_per_s_1_worker']:8.2f}/s 1w "
                      f"{row['samples_per_s_2_workers']:8.2f}/s 2w  pypower {row['pypower_runopf_per_s']:7.2f}/s "
                      f"ratio {row['ratio_to_pypower_1_worker']:.2f}", flush=True)
    loading = _load_times()
    if loading:
        print(f"load {loading['split']}: {loading['load_split_seconds']:.3f} s "
              f"(pandas read_parquet {loading['pandas_read_parquet_seconds']:.3f} s)", flush=True)
    result = {"benchmark": "splits", "load_largest_frozen_split": loading, "flowgauge_version": __version__, "quick": args.quick,
              "repeats": args.repeats, "cpu_count": os.cpu_count(), "python": platform.python_version(),
              "load_average_1min": os.getloadavg()[0], "numpy": np.__version__, "rows": rows,
              "note": "samples/s counts kept samples; the time of rejected draws is included. "
                      "The machine is shared: compare ratios, not absolute rates."}
    atomic_write_bytes(args.out, canonical_json(result, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
