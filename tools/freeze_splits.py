"""Build the frozen splits in splits/<network>/<split>/ (resumable; finished splits are skipped).

    python tools/freeze_splits.py [--networks demo ieee14 ...] [--workers 2] [--commit]
        [--limit ieee300:train=400 --reason "..."]

With --commit each finished split is committed alone (its three files only).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

from flowgauge.splits import build_split, splits_root, verify_split

NETWORKS = ["demo", "ieee14", "ieee30", "ieee57", "ieee118", "ieee300",
            "ieee14-limits", "ieee30-limits", "ieee57-limits", "ieee118-limits"]
# train first: test splits record which of their regimes occur in it, and test-ood draws regimes
# that never do
SPLITS = ["train", "test-id", "test-ood", "test-edge", "train-local"]
SEEDS = {"train": 1001, "test-id": 2002, "test-ood": 3003, "test-edge": 4004, "train-local": 5005}
COUNTS = {"test-id": 500, "test-ood": 500, "test-edge": 200, "train": 2000, "train-local": 2000}
LARGE_TRAIN = {"ieee118": 1000, "ieee300": 1000}
# test-ood keeps only regimes unseen in train for a third of its samples: allow more draws per slot
MAX_ATTEMPTS = {"test-ood": 80}
FILES = ("inputs.parquet", "references.parquet", "manifest.json")


def planned(network: str, split: str) -> int:
    if split in ("train", "train-local") and network in LARGE_TRAIN:
        return LARGE_TRAIN[network]
    return COUNTS[split]


def commit(folder: Path, message: str) -> None:
    repo = Path(__file__).resolve().parents[1]
    paths = [str(folder / f) for f in FILES]
    for attempt in range(30):  # another engineer's commit may hold the index lock
        add = subprocess.run(["git", "add", "--", *paths], cwd=repo, capture_output=True, text=True)
        if add.returncode == 0:
            done = subprocess.run(["git", "commit", "-q", "-m", message, "--", *paths], cwd=repo,
                                  capture_output=True, text=True)
            if done.returncode == 0:
                return
            err = done.stderr
        else:
            err = add.stderr
        if "index.lock" not in err:
            print(f"git failed: {err.strip()}", flush=True)
            return
        time.sleep(5 + attempt)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--networks", nargs="+", default=NETWORKS)
    ap.add_argument("--splits", nargs="+", default=SPLITS)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--chunk", type=int, default=10)
    ap.add_argument("--commit", action="store_true", help="commit each finished split")
    ap.add_argument("--limit", action="append", default=[],
                    help="NETWORK:SPLIT=N: freeze N samples instead of the planned count")
    ap.add_argument("--reason", default="", help="why the --limit counts are smaller (goes into the notes)")
    args = ap.parse_args(argv)
    limits = {}
    for item in args.limit:
        key, n = item.split("=")
        limits[tuple(key.split(":"))] = int(n)
    root = splits_root()
    for network in args.networks:
        for split in args.splits:
            out = root / network / split
            if (out / "manifest.json").exists():
                r = verify_split(out)
                print(f"{network}/{split}: present, verified ({r.samples} samples)", flush=True)
                continue
            n_plan = planned(network, split)
            n = limits.get((network, split), n_plan)
            notes = ""
            if n < n_plan:
                notes = (f"frozen with {n} samples instead of the planned {n_plan}: {args.reason}").strip()
            t0 = time.perf_counter()
            m = build_split(network, split, samples=n, seed=SEEDS[split], out=out, workers=args.workers,
                            chunk=args.chunk, notes=notes, max_attempts=MAX_ATTEMPTS.get(split, 25),
                            progress=lambda p, s=split: print(f"{network}/{s}: {p.solved}/{p.total} solved, "
                                                              f"{p.rejected} rejected", flush=True))
            dt = time.perf_counter() - t0
            rej = sum(m["rejected"].values())
            print(f"{network}/{split}: done, {n} samples, {rej} rejected, {dt:.0f} s, {m['split_hash']}", flush=True)
            if args.commit:
                commit(out, f"Frozen split {network}/{split}: {n} samples, {rej} rejected draws (seed {SEEDS[split]})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
