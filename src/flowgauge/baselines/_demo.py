"""The demo: on the bundled fictional network ``demo``, run every baseline on the test splits,
score them and return the comparison. Uses the frozen splits under ``splits/demo/`` when they
exist, otherwise builds small splits into a working folder."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from ._run import BASELINES, write_baseline

__all__ = ["DemoResult", "run_demo", "DEMO_NETWORK", "DEMO_SPLITS", "DEMO_SEED"]

DEMO_NETWORK = "demo"
DEMO_SPLITS = ("test-id", "test-ood", "test-edge")
DEMO_SEED = 7
# samples per split when the demo builds its own (small, so the demo takes well under a minute)
BUILT_SAMPLES = {"train": 60, "test-id": 20, "test-ood": 20, "test-edge": 10}


@dataclass(frozen=True)
class DemoResult:
    """``source``: "frozen" or "built"; ``split_paths``: split name -> folder; ``scorecards``:
    (baseline, split) -> Scorecard, in baseline then split order."""

    source: str
    split_paths: dict
    scorecards: dict


def _splits(workdir: Path, samples: dict[str, int], say: Callable[[str], None]) -> tuple[str, dict]:
    from ..splits import build_split, list_splits

    frozen = {p.name: p for p in list_splits() if p.parent.name == DEMO_NETWORK}
    if all(s in frozen for s in ("train", *DEMO_SPLITS)):
        return "frozen", {s: frozen[s] for s in ("train", *DEMO_SPLITS)}
    paths = {}
    for i, name in enumerate(("train", *DEMO_SPLITS)):
        out = workdir / DEMO_NETWORK / name
        if not (out / "manifest.json").exists():
            say(f"building split {DEMO_NETWORK}/{name} ({samples[name]} samples)")
            build_split(DEMO_NETWORK, name, samples=samples[name], seed=DEMO_SEED + i, out=out)
        paths[name] = out
    return "built", paths


def run_demo(workdir: str | Path, *, samples: dict[str, int] | None = None,
             say: Callable[[str], None] = lambda msg: None) -> DemoResult:
    """Run the demo in ``workdir`` (predictions files and, if needed, built splits go there).
    ``samples``: split name -> sample count for built splits; ``say`` reports each step."""
    from ..scoring import score
    from ..splits import load_split

    workdir = Path(workdir)
    source, paths = _splits(workdir, {**BUILT_SAMPLES, **(samples or {})}, say)
    train = load_split(paths["train"])
    cards = {}
    for name in BASELINES:
        for split_name in DEMO_SPLITS:
            split = load_split(paths[split_name])
            out = workdir / "predictions" / f"{name}.{split_name}.json"
            say(f"baseline {name} on {split_name}")
            write_baseline(name, split, out, train=train)
            cards[(name, split_name)] = score(out, split)
    return DemoResult(source=source, split_paths={k: str(v) for k, v in paths.items()}, scorecards=cards)
