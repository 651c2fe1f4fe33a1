"""Build the frozen splits in splits/<network>/<split>/ (resumable; finished splits are skipped)
and write each split's recipe to recipes/<network>/<split>.json.

    python tools/freeze_splits.py [--networks demo ieee14 ...] [--workers 2] [--commit]
        [--limit ieee300:train=400 --reason "..."]
    python tools/freeze_splits.py --networks activsg200 pegase1354 activsg2000 pegase2869 --workers 2

With --commit each finished split is committed alone (its three files and its recipe).

The large public systems (LARGE) get test splits of a few MB each (their counts in
LARGE_COUNTS: a sample of the 2,000-bus system takes about 60 kB) and a `test-year` split where
hourly area loads ship with the case. Their training split is built here because the test
splits are built beside it (regime labels, unseen-regime draws) and the baselines are fitted on
it, but only its recipe is committed: `splits/<large network>/train/` is in .gitignore, and
users rebuild it with `flowgauge splits rebuild <network>/train`.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

from flowgauge.splits import build_split, recipe_from_split, recipes_root, splits_root, verify_split, write_recipe

NETWORKS = ["demo", "ieee14", "ieee30", "ieee57", "ieee118", "ieee300",
            "ieee14-limits", "ieee30-limits", "ieee57-limits", "ieee118-limits"]
# train first: test splits record which of their regimes occur in it, and test-ood draws regimes
# that never do
SPLITS = ["train", "test-id", "test-ood", "test-edge", "train-local"]
SEEDS = {"train": 1001, "test-id": 2002, "test-ood": 3003, "test-edge": 4004, "train-local": 5005}
COUNTS = {"test-id": 500, "test-ood": 500, "test-edge": 200, "train": 2000, "train-local": 2000}
LARGE_TRAIN = {"ieee118": 1000, "ieee300": 1000}
# The large public systems: which splits, how many samples (committed test splits stay a few MB;
# the training split's data is not committed, only its recipe).
LARGE = ["activsg200", "pegase1354", "activsg2000", "pegase2869"]
# Cost per sample on this 2-core machine sets these counts: a spanning or edge sample needs a
# maximum-loadability solve, about 2.5 s on activsg200 and pegase1354 and 5-10 s on activsg2000
# (plus 2-3 s for its AC-OPF), and on activsg2000 more than half of the spanning draws are
# rejected (mostly directions whose start point has no feasible loading, each found after a
# full loadability solve); most hours of the 2,000-bus system's year are infeasible with the
# case's fixed capacitors and fixed commitment (each such draw costs 20-60 s before it is
# rejected; docs/splits.md, "Year design").
# pegase2869: 40 / 60 / 40 in 1,788 s, 1,136 s and 609 s with 2 workers (docs/splits.md); refrozen
# with test-ood 40 in 2,171 s, 2,123 s, 930 s and 1,784 s, other builds running beside them.
LARGE_COUNTS = {
    # test-id and test-edge grown from 40 to 200 samples on 2026-12-02, beside the train split
    # rebuilt from its recipe. test-ood: a 40-sample build with the concentrated kind stopped at
    # sample 10 (a concentrated slot) after 80 draws in a row were rejected (77 of them
    # loadability-infeasible); built later that day with the hotspot kind, which replaces the
    # concentrated kind above 1,000 buses (docs/splits.md, "outside")
    "pegase1354": {"train": 60, "test-id": 200, "test-ood": 200, "test-edge": 200},
    # train grown from 300 to 10,000 samples on 2026-12-03 (its first 300 samples are the earlier
    # train's: a spanning draw depends on its slot alone), and the four test splits refrozen beside
    # it, since they record which of its regimes occur in train and test-ood draws regimes unseen there
    "activsg200": {"train": 10000, "test-id": 150, "test-ood": 150, "test-edge": 150, "test-year": 300},
    # test-year added on 2026-12-02 once samples could carry switched capacitor banks (built
    # without the train split). train, test-id and test-edge refrozen on 2026-12-03 on an AVX-512
    # machine: the train recipe, written on an AVX2 machine, stops there at its pilot
    # (docs/splits.md, "How far it reproduces"), and test-ood and the learning baselines need
    # train on disk. test-edge has 100 samples (was 150). test-ood (seed 3003) built beside
    # that train on 2026-12-03 in a later session (docs/splits.md)
    "activsg2000": {"train": 40, "test-id": 60, "test-ood": 40, "test-edge": 100, "test-year": 200},
    # train, test-id and test-edge refrozen on 2026-12-03 on an AVX-512 machine: the train recipe,
    # written without sketches on another machine, differed at sample 0's references when rebuilt
    # there (docs/splits.md, "How far it reproduces"), and test-ood needs train on disk; test-ood
    # (seed 3003) built beside the refrozen train the same day (given the train recipe's pilot, the
    # pilot this tool solves, to spare solving it again)
    "pegase2869": {"train": 40, "test-id": 60, "test-ood": 40, "test-edge": 40},
}
SEEDS["test-year"] = 6006
# Single-outage splits (one branch or generator out per sample) on these networks, built after
# their train split (test-n1 records which of its regimes occur in train).
N1_NETWORKS = ["demo", "ieee14", "ieee57", "ieee118"]
N1_COUNTS = {"test-n1": 300, "train-n1": 1000}
N1_LARGE_TRAIN = {"ieee118": 600}
SEEDS["test-n1"] = 7007
SEEDS["train-n1"] = 8008
# test-ood keeps only regimes unseen in train for a third of its samples: allow more draws per slot
MAX_ATTEMPTS = {"test-ood": 80}
FILES = ("inputs.parquet", "references.parquet", "manifest.json")


def splits_of(network: str) -> list[str]:
    """The frozen splits of a network, train first."""
    if network in LARGE_COUNTS:
        return list(LARGE_COUNTS[network])
    return list(SPLITS) + (list(N1_COUNTS) if network in N1_NETWORKS else [])


def committed_data(network: str, split: str) -> bool:
    """Whether the split's data is committed (else only its recipe)."""
    return not (network in LARGE_COUNTS and split == "train")


def planned(network: str, split: str) -> int:
    if network in LARGE_COUNTS:
        return LARGE_COUNTS[network][split]
    if split in N1_COUNTS:
        return N1_LARGE_TRAIN.get(network, N1_COUNTS[split]) if split == "train-n1" else N1_COUNTS[split]
    if split in ("train", "train-local") and network in LARGE_TRAIN:
        return LARGE_TRAIN[network]
    return COUNTS[split]


def commit(folder: Path, message: str, recipe: Path | None = None, data: bool = True) -> None:
    repo = Path(__file__).resolve().parents[1]
    paths = [str(folder / f) for f in FILES] if data else []
    if recipe is not None:
        paths.append(str(recipe))
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
    ap.add_argument("--splits", nargs="+", default=None, help="default: every split of each network")
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
        for split in (args.splits or splits_of(network)):
            if split not in splits_of(network):
                continue
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
            attempts: list[int] = []  # each sample's draw, for the recipe
            m = build_split(network, split, samples=n, seed=SEEDS[split], out=out, workers=args.workers,
                            chunk=args.chunk, notes=notes, max_attempts=MAX_ATTEMPTS.get(split, 25),
                            attempts_out=attempts,
                            progress=lambda p, s=split: print(f"{network}/{s}: {p.solved}/{p.total} solved, "
                                                              f"{p.rejected} rejected", flush=True))
            dt = time.perf_counter() - t0
            rej = sum(m["rejected"].values())
            print(f"{network}/{split}: done, {n} samples, {rej} rejected, {dt:.0f} s, {m['split_hash']}", flush=True)
            recipe = recipes_root() / network / f"{split}.json"
            # the pilot this process fitted is kept in the recipe, and the draws the build reported
            # (none for chunks resumed from an earlier version: then found by drawing again)
            write_recipe(recipe_from_split(out, attempts=attempts or None, workers=args.workers), recipe)
            if args.commit:
                what = "Frozen split" if committed_data(network, split) else "Recipe of the split"
                commit(out, f"{what} {network}/{split}: {n} samples, {rej} rejected draws (seed {SEEDS[split]})",
                       recipe=recipe, data=committed_data(network, split))
    return 0


if __name__ == "__main__":
    sys.exit(main())
