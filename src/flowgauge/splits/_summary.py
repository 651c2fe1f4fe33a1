"""Per-split statistics for ``flowgauge splits show``: load range, regimes and coverage."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._coverage import DISCOVERY_BLOCK, FAMILIES, coverage
from ._load import load_split, split_network

__all__ = ["SplitSummary", "summarize_split", "split_coverage", "is_thermal", "is_voltage"]


def is_thermal(label: str) -> bool:
    """A binding-limit label of a branch thermal limit, e.g. ``branch:7:rate_from``."""
    return label.startswith("branch:") and "rate" in label


def is_voltage(label: str) -> bool:
    """A binding-limit label of a bus voltage limit, e.g. ``bus:3:vmax``."""
    return label.startswith("bus:") and (label.endswith("vmax") or label.endswith("vmin"))


@dataclass(frozen=True)
class SplitSummary:
    """``load_pct_of_base``: (min, median, max) of total active load as % of the network's base
    total; ``distinct_signatures``: number of different binding-limit sets (None when neither
    references nor a recorded coverage are available); ``share_thermal``, ``share_voltage``:
    fraction of samples with a binding thermal / voltage limit (NaN when unknown);
    ``solve_seconds``: the manifest's reference solve-time statistics [s].

    Coverage (:func:`flowgauge.splits._coverage.coverage`): ``discovery``: new regimes per block
    of ``discovery_block`` samples in sample order (the last block may be shorter; empty when
    unknown); ``family_shares``: limit family -> share of samples with a binding limit of that
    family (every family of ``FAMILIES``; empty when unknown); ``kinds``: samples per draw kind
    (None for splits written without kinds); ``regime_seen_in_train``: share of samples whose
    regime occurs in the training split (None for training splits, or when no training split
    is known); ``coverage_from``: ``"manifest"`` (recorded at build time), ``"references"``
    (computed here, for manifests without it) or ``"none"``. ``states``: for splits with
    per-sample states, how many samples have a branch out, a generator out and bus shunts
    switched out (with the range of shunts out), in words; None otherwise.
    """

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
    discovery: tuple[int, ...] = ()
    discovery_block: int = DISCOVERY_BLOCK
    family_shares: dict | None = None
    kinds: dict | None = None
    regime_seen_in_train: float | None = None
    coverage_from: str = "none"
    states: str | None = None

    @property
    def regimes(self) -> int | None:
        return self.distinct_signatures

    @property
    def last_block_samples(self) -> int:
        """Samples in the last block of the discovery curve (up to ``discovery_block``)."""
        if not self.discovery:
            return 0
        return self.samples - self.discovery_block * (len(self.discovery) - 1)

    @property
    def last_block_new(self) -> int | None:
        """New regimes in the last block of the discovery curve (None when unknown)."""
        return self.discovery[-1] if self.discovery else None

    @property
    def still_rising(self) -> bool | None:
        """True when the last block still found new regimes (None when unknown)."""
        return None if not self.discovery else self.discovery[-1] > 0


def _seen_in_train(s, refs) -> np.ndarray | None:
    """Per sample, whether its regime occurs in the training split: the references' own column,
    else (splits written before it) the sibling ``train`` folder's signatures, provided the
    manifest names no other training split."""
    if refs.regime_seen_in_train is not None:
        return refs.regime_seen_in_train
    if not s.name.startswith("test-"):
        return None
    sibling = s.path.parent / "train"
    if not (sibling / "manifest.json").exists():
        return None
    train = load_split(sibling)
    recorded = (s.manifest.get("train") or {}).get("split_hash")
    if train.references is None or (recorded is not None and recorded != train.split_hash):
        return None
    return np.isin(refs.signature.astype(str), train.references.signature.astype(str))


def split_coverage(s) -> tuple[dict | None, str]:
    """The coverage of a loaded split and where it came from: the manifest's ``coverage``
    (recorded at build time), else computed from the references with the same function
    (``"references"``), else (None, ``"none"``)."""
    cov = s.manifest.get("coverage")
    if cov is not None:
        return cov, "manifest"
    refs = s.references
    if refs is None:
        return None, "none"
    return coverage(refs.signature, refs.binding, s.kind, _seen_in_train(s, refs)), "references"


def _states_text(s, net) -> str | None:
    """Per-sample states in words (None for a split without them)."""
    if not s.has_states:
        return None
    br_out = (np.asarray(net.in_service, bool) & ~s.branch_in_service).any(axis=1)
    gen_out = (~s.gen_in_service).any(axis=1)
    parts = [f"a branch out in {int(br_out.sum())}", f"a generator out in {int(gen_out.sum())}"]
    if s.shunt_in_service is not None:
        has = (np.asarray(net.gs_mw) != 0) | (np.asarray(net.bs_mvar) != 0)
        out = (~s.shunt_in_service[:, has]).sum(axis=1)
        parts.append(f"bus shunts switched out in {int((out > 0).sum())} ({int(out.min())}-{int(out.max())} of "
                     f"{int(has.sum())}, median {float(np.median(out)):g})")
    return ", ".join(parts) + f" of {s.n_samples} samples"


def summarize_split(path: str | Path) -> SplitSummary:
    s = load_split(path)
    net = split_network(s.manifest, s.path)
    base = float(np.sum(net.pd_mw))
    pct = np.sum(s.pd_mw, axis=1) / base * 100.0
    r = s.references
    cov, source = split_coverage(s)
    if r is not None:
        n_sig = int(np.unique(r.signature).size)
        thermal = float(np.mean([any(is_thermal(x) for x in b) for b in r.binding]))
        voltage = float(np.mean([any(is_voltage(x) for x in b) for b in r.binding]))
    elif cov is not None:
        n_sig = int(cov["regimes"])
        thermal = float(cov["family_shares"]["thermal"])
        voltage = float(cov["family_shares"]["voltage"])
    else:
        n_sig, thermal, voltage = None, float("nan"), float("nan")
    m = s.manifest
    shares = None if cov is None else {f: float(cov["family_shares"].get(f, 0.0)) for f in FAMILIES}
    seen = None if cov is None else cov.get("regime_seen_in_train")
    return SplitSummary(network=m["network"]["name"], split=m["split"], path=s.path, split_hash=m["split_hash"],
                        samples=m["samples"], design=m["design"]["name"],
                        load_pct_of_base=(float(pct.min()), float(np.median(pct)), float(pct.max())),
                        distinct_signatures=n_sig, share_thermal=thermal, share_voltage=voltage,
                        rejected=dict(m["rejected"]), solve_seconds=dict(m["reference_solve_seconds"]),
                        notes=m["notes"],
                        discovery=() if cov is None else tuple(int(x) for x in cov["discovery"]),
                        discovery_block=DISCOVERY_BLOCK if cov is None else int(cov["discovery_block"]),
                        family_shares=shares,
                        kinds=None if cov is None or cov.get("kinds") is None else dict(cov["kinds"]),
                        regime_seen_in_train=None if seen is None else float(seen),
                        coverage_from=source, states=_states_text(s, net))
