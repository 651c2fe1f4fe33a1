"""Benchmark ``flowgauge rank`` on the committed leaderboard.

Targets (issue 6): a rebuild with fresh scorecards under 60 s, ``--verify`` under 300 s. Each run
works on a copy of the board in a temporary folder, so the repository is not touched. Ratios
compare against references measured in the same run: the rebuild against reading every
submission and scorecard (the least a rebuild must do), ``--verify`` against scoring every
submission once with ``flowgauge.scoring.score`` (the least a verification must do).

    python benchmarks/rank.py [--board leaderboard] [--repeats 3] [--verify-repeats 1]

Writes benchmarks/results/rank.json.
"""

from __future__ import annotations

import argparse
import os
import platform
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TARGET_REBUILD_S = 60.0
TARGET_VERIFY_S = 300.0


def _timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def _median(fn, repeats: int) -> float:
    return statistics.median(_timed(fn) for _ in range(repeats))


def main(argv: list[str] | None = None) -> int:
    from flowgauge import __version__
    from flowgauge._io import atomic_write_bytes, canonical_json
    from flowgauge.leaderboard import build_board
    from flowgauge.leaderboard._board import collect_submissions
    from flowgauge.scoring import read_scorecard, score
    from flowgauge.submission import load_predictions

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--board", default=str(ROOT / "leaderboard"))
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--verify-repeats", type=int, default=1)
    ap.add_argument("--out", default=str(ROOT / "benchmarks/results/rank.json"))
    args = ap.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="flowgauge-rank-bench-") as tmp:
        board = Path(tmp) / "board"
        shutil.copytree(args.board, board)
        build_board(board)  # make every scorecard fresh before timing
        subs = [s for s in collect_submissions(board) if s.file is not None]

        def read_all():
            for s in subs:
                load_predictions(s.file)
                read_scorecard(s.scorecard)

        def score_all():
            for s in subs:
                score(s.file).to_dict()

        read_s = _median(read_all, args.repeats)
        rebuild_s = _median(lambda: build_board(board), args.repeats)
        score_s = _median(score_all, args.verify_repeats)
        verify_s = _median(lambda: build_board(board, verify=True), args.verify_repeats)
        report = build_board(board)

    result = {
        "benchmark": "rank",
        "flowgauge_version": __version__,
        "machine": {"cpus": os.cpu_count(), "python": platform.python_version(),
                    "platform": platform.platform()},
        "board": {"submissions": len(subs), "networks": sorted({t.network for t in report.tables}),
                  "tables": len(report.tables)},
        "repeats": {"rebuild": args.repeats, "verify": args.verify_repeats},
        "seconds_median": {"rebuild_fresh": rebuild_s, "read_submissions_and_scorecards": read_s,
                           "verify": verify_s, "score_every_submission": score_s},
        "ratios": {"rebuild_over_reading": rebuild_s / read_s if read_s else None,
                   "verify_over_scoring": verify_s / score_s if score_s else None},
        "targets_seconds": {"rebuild_fresh": TARGET_REBUILD_S, "verify": TARGET_VERIFY_S},
        "meets_targets": {"rebuild_fresh": rebuild_s < TARGET_REBUILD_S,
                          "verify": verify_s < TARGET_VERIFY_S},
    }
    atomic_write_bytes(args.out, canonical_json(result, digits=4, indent=1))
    sys.stdout.write(canonical_json(result, digits=4, indent=1).decode())
    return 0 if all(result["meets_targets"].values()) else 1


if __name__ == "__main__":
    sys.exit(main())
