"""Per-split statistics for ``flowgauge splits show``."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._load import load_split, split_network

__all__ = ["SplitSummary", "summarize_split", "is_thermal", "is_voltage"]


def is_thermal(label: str) -> bool:
    """A binding-limit label of a branch thermal limit, e.g. ``branch:7:rate_from``."""
    return label.startswith("branch:") and "rate" in label


def is_voltage(label: str) -> bool:
    """A binding-limit label of a bus voltage limit, e.g. ``bus:3:vmax``."""
    return label.startswith("bus:") and (label.endswith("vmax") or label.endswith("vmin"))


@dataclass(frozen=True)
class SplitSummary:
    """``load_pct_of_base``: (min, median, max) of total active load as % of the network's base
    total; ``distinct_signatures``: number of different binding-limit sets; ``share_thermal``,
    ``share_voltage``: fraction of samples with a binding thermal / voltage limit (NaN without
    references); ``solve_seconds``: the manifest's reference solve-time statistics [s]."""

    network: str
    split: str
    path: Path
    split_hash: str
    samples: int
    design: str
    load_pct_of_base: tuple[float, float, float]
    distinct_signatures: int | None
    share_thermal: float
    share_voltage: float
    rejected: dict
    solve_seconds: dict
    notes: str


def summarize_split(path: str | Path) -> SplitSummary:
    s = load_split(path)
    base = float(np.sum(split_network(s.manifest, s.path).pd_mw))
    pct = np.sum(s.pd_mw, axis=1) / base * 100.0
    r = s.references
    if r is not None:
        n_sig = int(np.unique(r.signature).size)
        thermal = float(np.mean([any(is_thermal(x) for x in b) for b in r.binding]))
        voltage = float(np.mean([any(is_voltage(x) for x in b) for b in r.binding]))
    else:
        n_sig, thermal, voltage = None, float("nan"), float("nan")
    m = s.manifest
    return SplitSummary(network=m["network"]["name"], split=m["split"], path=s.path, split_hash=m["split_hash"],
                        samples=m["samples"], design=m["design"]["name"],
                        load_pct_of_base=(float(pct.min()), float(np.median(pct)), float(pct.max())),
                        distinct_signatures=n_sig, share_thermal=thermal, share_voltage=voltage,
                        rejected=dict(m["rejected"]), solve_seconds=dict(m["reference_solve_seconds"]),
                        notes=m["notes"])
