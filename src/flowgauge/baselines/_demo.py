"""The demo: on the bundled fictional network ``demo``, run every baseline on the test splits,
score them and return the comparison. Each split is the frozen one under ``splits/demo/`` when
it exists, otherwise a small split built into the working folder.

The maintenance scenario (docs/networks.md): circuit 2 of the Orvanne corridor out for
maintenance in every sample of a small split made from the first ``test-id`` samples, its
references solved again without the circuit (``_maintenance.split_with_states``)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from ._run import BASELINES, write_baseline

__all__ = ["DemoResult", "run_demo", "DEMO_NETWORK", "DEMO_SPLITS", "DEMO_SEEDS", "BUILT_SAMPLES", "MAINTENANCE",
           "MAINTENANCE_BRANCH_ID"]

DEMO_NETWORK = "demo"
DEMO_SPLITS = ("test-id", "test-ood", "test-edge")
DEMO_SEEDS = {"train": 71, "test-id": 72, "test-ood": 73, "test-edge": 74}
# samples per split when the demo builds its own (small, so the demo takes well under a minute)
BUILT_SAMPLES = {"train": 60, "test-id": 20, "test-ood": 20, "test-edge": 10}
# the maintenance scenario: its name in the demo's table (short: the table fits 80 columns),
# the branch out (id 2: circuit 2 of the Orvanne corridor, bus 1 - bus 2) and how many of the
# first test-id samples it takes
MAINTENANCE = "line-out"
MAINTENANCE_BRANCH_ID = 2
MAINTENANCE_SAMPLES = 20


@dataclass(frozen=True)
class DemoResult:
    """``sources``: split name -> "frozen" or "built"; ``split_paths``: split name -> folder;
    ``scorecards``: (baseline, split) -> Scorecard, in baseline then split order (the test
    splits, then :data:`MAINTENANCE`)."""

    sources: dict
    split_paths: dict
    scorecards: dict


def _splits(workdir: Path, samples: dict[str, int], say: Callable[[str], None]) -> tuple[dict, dict]:
    from ..splits import build_split, list_splits

    frozen = {p.name: p for p in list_splits() if p.parent.name == DEMO_NETWORK}
    paths, sources = {}, {}
    for name in ("train", *DEMO_SPLITS):
        if name in frozen:
            paths[name], sources[name] = frozen[name], "frozen"
            continue
        out = workdir / DEMO_NETWORK / name
        if not (out / "manifest.json").exists():
            say(f"no frozen split {DEMO_NETWORK}/{name}: building one with {samples[name]} samples")
            build_split(DEMO_NETWORK, name, samples=samples[name], seed=DEMO_SEEDS[name], out=out)
        paths[name], sources[name] = out, "built"
    return paths, sources


def _maintenance_split(workdir: Path, test_id: Path, samples: int, say: Callable[[str], None]) -> Path:
    """The maintenance split in ``workdir`` (made once): the first ``samples`` samples of the
    test-id split with circuit 2 of the Orvanne corridor out, references solved without it."""
    import numpy as np

    from ..splits import load_split
    from ._maintenance import split_with_states

    out = workdir / DEMO_NETWORK / MAINTENANCE
    if (out / "manifest.json").exists():
        return out
    src = load_split(test_id)
    n = min(samples, src.n_samples)
    say(f"{MAINTENANCE}: the first {n} {DEMO_NETWORK}/test-id samples, Orvanne corridor circuit 2 out")
    br = np.ones((n, src.network.n_branch), bool)
    br[:, np.flatnonzero(src.network.branch_id == MAINTENANCE_BRANCH_ID)] = False
    split_with_states(src, out, br, np.ones((n, src.network.n_gen), bool), rows=np.arange(n),
                      notes=f"maintenance scenario of the demo: the first {n} test-id samples with branch "
                            f"id {MAINTENANCE_BRANCH_ID} (circuit 2 of the Orvanne corridor) out")
    return out


def run_demo(workdir: str | Path, *, samples: int | None = None,
             say: Callable[[str], None] = lambda msg: None,
             progress: Callable[[int, int], None] | None = None) -> DemoResult:
    """Run the demo in ``workdir`` (predictions files and any built splits go there).
    ``samples``: samples per split for splits the demo builds (default :data:`BUILT_SAMPLES`);
    ``say`` reports each step; ``progress(done, total)`` counts the (baseline, split) runs."""
    from ..errors import InputError
    from ..scoring import score
    from ..splits import load_split

    if samples is not None and (isinstance(samples, bool) or not isinstance(samples, int) or samples < 2):
        raise InputError(f"expected an integer >= 2, got {samples!r}", where="--samples")
    counts = dict(BUILT_SAMPLES) if samples is None else {k: samples for k in BUILT_SAMPLES}
    workdir = Path(workdir)
    paths, sources = _splits(workdir, counts, say)
    paths[MAINTENANCE] = _maintenance_split(workdir, paths["test-id"],
                                            MAINTENANCE_SAMPLES if samples is None else samples, say)
    sources[MAINTENANCE] = "built"
    train = load_split(paths["train"])
    cards = {}
    shown = (*DEMO_SPLITS, MAINTENANCE)
    total = len(BASELINES) * len(shown)
    if progress is not None:
        progress(0, total)
    for name in BASELINES:
        for split_name in shown:
            split = load_split(paths[split_name])
            out = workdir / "predictions" / f"{name}.{split_name}.json"
            say(f"baseline {name} on {DEMO_NETWORK}/{split_name} ({split.n_samples} samples)")
            write_baseline(name, split, out, train=train)
            cards[(name, split_name)] = score(out, split)
            if progress is not None:
                progress(len(cards), total)
    return DemoResult(sources=sources, split_paths={k: str(v) for k, v in paths.items()}, scorecards=cards)
