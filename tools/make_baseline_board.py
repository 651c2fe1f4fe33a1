"""Write the baseline entries of the committed leaderboard: every baseline on every frozen test
split, as leaderboard/submissions/<network>/<split>/<baseline>.parquet, and the calibration rows:
each split's reference with seeded noise at three levels, as
leaderboard/submissions/calibration/<network>/<split>/noise-<level>.parquet (shown apart on the
board, not ranked).

    python tools/make_baseline_board.py [--networks demo ieee14 ...] [--splits test-id ...]
    flowgauge rank          # then rescore and rebuild the tables and the page

Every frozen test split of each network gets entries (test-id, test-ood, test-edge, and
test-year / test-n1 where frozen), unless --splits narrows them; the baselines that learn
(nearest, linear) are fitted on the network's train split (for the large systems, rebuild it
first: flowgauge splits rebuild <network>/train). Where it is absent, only the baselines that do
not learn (dc-opf) and the calibration rows are entered, and the tool says which were skipped.

Run it after the frozen splits change (their hashes are recorded in every predictions file).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from flowgauge.baselines import BASELINES, write_baseline
from flowgauge.baselines._calibration import CALIBRATION_LEVELS, calibration_name, calibration_predictions
from flowgauge.submission import write_predictions
from flowgauge.splits import load_split, splits_root

ROOT = Path(__file__).resolve().parents[1]
TEST_SPLITS = ("test-id", "test-ood", "test-edge", "test-year", "test-n1")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--networks", nargs="+", default=None, help="default: every network with frozen splits")
    ap.add_argument("--out", type=Path, default=ROOT / "leaderboard" / "submissions")
    ap.add_argument("--splits", nargs="+", default=list(TEST_SPLITS), help="test splits to enter (where frozen)")
    args = ap.parse_args(argv)
    root = splits_root()
    networks = args.networks or sorted(p.name for p in root.iterdir()
                                       if p.is_dir() and (p / "train" / "manifest.json").exists())
    for network in networks:
        has_train = (root / network / "train" / "manifest.json").exists()
        train = load_split(root / network / "train") if has_train else None
        for split_name in args.splits:
            if not (root / network / split_name / "manifest.json").exists():
                continue
            split = load_split(root / network / split_name)
            for name in sorted(BASELINES):
                if BASELINES[name][0] and train is None:  # a baseline that learns, and no train split here
                    print(f"{network}/{split_name}: {name} skipped (no {network}/train here to fit it on)", flush=True)
                    continue
                out = args.out / network / split_name / f"{name}.parquet"  # Parquet: a tenth of the JSON's size
                write_baseline(name, split, out, train=train, format="parquet")
                print(f"{network}/{split_name}: {name} -> {out}", flush=True)
            for level in CALIBRATION_LEVELS:
                pg, vm = calibration_predictions(split, level)
                out = args.out / "calibration" / network / split_name / f"noise-{level:.0e}.parquet"
                out.parent.mkdir(parents=True, exist_ok=True)
                model = {"name": calibration_name(level), "authors": ["flowgauge"],
                         "description": f"Calibration row: the split's reference with seeded noise, relative "
                                        f"{level:.0e} on pg_mw and absolute {level:.0e} p.u. on vm_pu.",
                         "training_data_only": True}
                write_predictions(split, pg_mw=pg, vm_pu=vm, model=model, path=out)
                print(f"{network}/{split_name}: {model['name']} -> {out}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
