"""Benchmark: loading and validating a 10,000-sample ieee118 predictions file.

Target (issue 5): under 10 s with bounded memory. In the same run, two references: parsing
the same file with the standard ``json`` module alone (the floor), and jsonschema checking
whole documents sample by sample (measured on a slice, scaled to the full file). Peak memory
is what tracemalloc sees allocated (Python objects and numpy arrays) during the call. Medians of ``--repeat`` runs.

    python benchmarks/validate.py [--samples 10000] [--repeat 3] [--out benchmarks/results/validate.json]

The predictions are the network's published solved state plus noise, for a split of
``ieee118``: the frozen ``ieee118/test-id`` split when present, else one built in memory
with sample ids 0..S-1 (validation needs only its ids and element order).
"""

from __future__ import annotations

import argparse
import gc
import json
import platform
import statistics
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np

from flowgauge import __version__
from flowgauge._io import atomic_write_bytes, canonical_json
from flowgauge.network import load_network
from flowgauge.submission import check_predictions, load_predictions, predictions_schema, write_predictions

MODEL = {"name": "benchmark noise", "authors": ["flowgauge"], "description": "published state plus noise",
         "training_data_only": True}


def ieee118_split(samples: int):
    from flowgauge.splits import Split, list_splits, load_split
    from flowgauge.splits._manifest import network_hash
    frozen = [p for p in list_splits() if p.parent.name == "ieee118" and p.name == "test-id"]
    if frozen:
        split = load_split(frozen[0], references=False)
        if split.n_samples >= samples:
            return split, "frozen ieee118/test-id"
    net = load_network("ieee118")
    manifest = {"split": "test-id", "split_hash": "b" * 64, "samples": samples,
                "network": {"name": "ieee118", "content_hash": network_hash(net)},
                "elements": {k: getattr(net, k).tolist() for k in ("bus_id", "gen_id", "load_id", "branch_id")}}
    split = Split(path=Path("in-memory"), manifest=manifest, sample_id=np.arange(samples, dtype=np.int64),
                  pd_mw=np.tile(net.pd_mw, (samples, 1)), qd_mvar=np.tile(net.qd_mvar, (samples, 1)))
    return split, "in memory (sample ids 0..S-1)"


def arrays(split, seed: int = 118) -> dict:
    net, s = split.network, split.n_samples
    rng = np.random.Generator(np.random.PCG64(seed))
    return {"pg_mw": np.tile(net.pg_mw, (s, 1)) * rng.uniform(0.9, 1.1, (s, net.n_gen)),
            "vm_pu": np.tile(net.vm_pu, (s, 1)) + rng.normal(0, 0.01, (s, net.n_bus)),
            "va_deg": np.tile(net.va_deg, (s, 1)) + rng.normal(0, 0.5, (s, net.n_bus)),
            "qg_mvar": np.tile(net.qg_mvar, (s, 1)) + rng.normal(0, 2.0, (s, net.n_gen)),
            "inference_ms": rng.uniform(0.1, 2.0, s)}


def timed(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def traced_peak_mb(fn) -> float:
    """Peak memory Python and numpy allocate while ``fn`` runs (tracemalloc) [MB]."""
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1] / 2**20
    finally:
        tracemalloc.stop()


def jsonschema_seconds(path: Path, n_slice: int) -> float:
    """Full jsonschema validation of a document holding the first ``n_slice`` samples."""
    import jsonschema
    doc = json.loads(path.read_text())
    doc["samples"] = doc["samples"][:n_slice]
    validator = jsonschema.Draft202012Validator(predictions_schema())
    t = time.perf_counter()
    errors = list(validator.iter_errors(doc))
    assert not errors
    return time.perf_counter() - t


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--out", type=Path, default=Path(__file__).parent / "results" / "validate.json")
    args = ap.parse_args(argv)
    split, origin = ieee118_split(args.samples)
    a = arrays(split)
    with tempfile.TemporaryDirectory() as tmp:
        pj, pp = Path(tmp) / "p.json", Path(tmp) / "p.parquet"
        t_write_json = timed(lambda: write_predictions(split, **a, model=MODEL, path=pj), 1)
        t_write_parquet = timed(lambda: write_predictions(split, **a, model=MODEL, path=pp), 1)
        t_json_floor = timed(lambda: json.loads(pj.read_bytes()), args.repeat)
        t_load_json = timed(lambda: load_predictions(pj), args.repeat)
        t_check_json = timed(lambda: check_predictions(pj, split), args.repeat)
        t_check_parquet = timed(lambda: check_predictions(pp, split), args.repeat)
        n_slice = min(500, args.samples)
        t_schema = jsonschema_seconds(pj, n_slice) * args.samples / n_slice
        mem_json = traced_peak_mb(lambda: check_predictions(pj, split))
        mem_floor = traced_peak_mb(lambda: json.loads(pj.read_bytes()))
        mem_parquet = traced_peak_mb(lambda: check_predictions(pp, split))
        size_json, size_parquet = pj.stat().st_size, pp.stat().st_size
    net = split.network
    result = {
        "benchmark": "validate", "flowgauge_version": __version__, "python": platform.python_version(),
        "machine": platform.machine(), "split": origin, "network": "ieee118",
        "samples": args.samples, "n_bus": int(net.n_bus), "n_gen": int(net.n_gen), "repeat": args.repeat,
        "fields": ["pg_mw", "vm_pu", "va_deg", "qg_mvar", "inference_ms"],
        "file_bytes": {"json": size_json, "parquet": size_parquet},
        "seconds_median": {
            "write_json": t_write_json, "write_parquet": t_write_parquet,
            "load_json": t_load_json, "validate_json": t_check_json, "validate_parquet": t_check_parquet,
            "reference_json_parse_only": t_json_floor,
            "reference_full_jsonschema_scaled": t_schema,
        },
        "reference_full_jsonschema_slice_samples": n_slice,
        "ratios": {
            "validate_json_over_json_parse_only": t_check_json / t_json_floor,
            "full_jsonschema_over_validate_json": t_schema / t_check_json,
        },
        "peak_traced_mb": {"validate_json": mem_json, "json_parse_only": mem_floor,
                           "validate_parquet": mem_parquet},
        "peak_traced_over_file_size": {"validate_json": mem_json * 2**20 / size_json,
                                       "json_parse_only": mem_floor * 2**20 / size_json},
        "target": {"validate_json_seconds_below": 10.0, "met": t_check_json < 10.0},
    }
    atomic_write_bytes(args.out, canonical_json(result, indent=1))
    sys.stdout.write(canonical_json(result, indent=1).decode())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
