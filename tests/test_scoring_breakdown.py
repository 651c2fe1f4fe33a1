"""Scorecards break their aggregates down by whether a sample's regime occurs in the training
split and by the kind of draw, when the split records them."""

import numpy as np
import pytest

from flowgauge.baselines import write_baseline
from flowgauge.scoring import score
from flowgauge.splits import build_split, load_split


@pytest.fixture(scope="module")
def scored(tmp_path_factory):
    root = tmp_path_factory.mktemp("breakdown") / "ieee14"
    build_split("ieee14", "train", samples=16, seed=11, out=root / "train", chunk=8)
    build_split("ieee14", "test-ood", samples=9, seed=12, out=root / "test-ood", chunk=9)
    preds = write_baseline("nearest", root / "test-ood", root / "nearest.json", train=root / "train")
    return score(preds, root / "test-ood"), load_split(root / "test-ood")


def test_breakdown_by_regime_and_kind(scored):
    card, split = scored
    a, table = card.aggregates, card.per_sample
    order = np.argsort(split.sample_id)
    seen = np.asarray(split.references.regime_seen_in_train)[order]
    kind = np.asarray(split.kind)[order]
    groups = a["by_regime_seen_in_train"]
    assert groups["seen"]["samples"] + groups["unseen"]["samples"] == a["samples"] == 9
    for name, mask in (("seen", seen), ("unseen", ~seen)):
        g = groups[name]
        if mask.any():  # recomputed here from the per-sample table
            assert g["restoration_failure_rate"] == pytest.approx(table["restoration_failed"][mask].mean())
            assert g["solved_share"] == pytest.approx(table["solved"][mask].mean())
            assert g["severity"]["max"] == pytest.approx(table["severity"][mask].max())
    assert sorted(a["by_kind"]) == ["concentrated", "power-factor", "unseen-regime"]
    for name, g in a["by_kind"].items():
        assert g["samples"] == int((kind == name).sum()) == 3
        assert g["restoration_failure_rate"] == pytest.approx(table["restoration_failed"][kind == name].mean())
    # every unseen-regime sample is unseen in train, so its group's count is at most the unseen count
    assert a["by_kind"]["unseen-regime"]["samples"] <= groups["unseen"]["samples"]


def test_strict_scorecards_carry_no_breakdown(scored):
    _, split = scored
    strict = score(split.path.parent / "nearest.json", split, profile="strict")
    assert "by_regime_seen_in_train" not in strict.aggregates and "by_kind" not in strict.aggregates
