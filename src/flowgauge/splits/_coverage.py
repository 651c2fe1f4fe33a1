"""Coverage of a split, measured rather than claimed: how many distinct binding-limit regimes its
references have, how fast new ones still appear, and how often each limit family binds."""

from __future__ import annotations

from collections import Counter

import numpy as np

from ._spanning import regime_families

__all__ = ["DISCOVERY_BLOCK", "FAMILIES", "coverage"]

DISCOVERY_BLOCK = 100  # accepted samples per point of the discovery curve
FAMILIES = ("voltage", "active_power", "reactive_power", "thermal", "angle")


def coverage(signature, binding, kind=None, seen_in_train=None) -> dict:
    """``regimes``: distinct signatures; ``discovery``: for each block of
    :data:`DISCOVERY_BLOCK` samples in sample order, the regimes first seen in it (the last block
    may be shorter); ``family_shares``: share of samples with at least one binding limit of each
    family; ``kinds``: samples per draw kind; ``regime_seen_in_train``: share of samples whose
    regime occurs in the training split (test splits built beside one)."""
    sig = [str(s) for s in signature]
    seen: set[str] = set()
    discovery = []
    for start in range(0, len(sig), DISCOVERY_BLOCK):
        block = sig[start:start + DISCOVERY_BLOCK]
        new = {s for s in block if s not in seen}
        discovery.append(len(new))
        seen |= new
    fams = [regime_families(b) for b in binding]
    n = max(len(sig), 1)
    out = {"regimes": len(seen), "discovery_block": DISCOVERY_BLOCK, "discovery": discovery,
           "family_shares": {f: sum(f in x for x in fams) / n for f in FAMILIES}}
    if kind is not None:
        out["kinds"] = dict(sorted(Counter(str(k) for k in kind).items()))
    if seen_in_train is not None:
        out["regime_seen_in_train"] = float(np.mean(seen_in_train)) if len(sig) else 0.0
    return out
