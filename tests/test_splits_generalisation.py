"""The split set shows the effect it exists for: a proxy fitted on the narrow training split
(`train-local`, loadings within about 15 % of the base case) does worse on the spanning test
split than the same proxy fitted on the spanning `train` split."""

import pytest

from flowgauge.baselines import write_baseline
from flowgauge.scoring import score
from flowgauge.splits import load_split


@pytest.mark.parametrize("network", ["ieee30"])
def test_narrow_training_generalises_worse(network, tmp_path):
    test = load_split(network, "test-id")
    cards = {}
    for train in ("train", "train-local"):
        path = write_baseline("linear", test, tmp_path / f"{train}.parquet", train=load_split(network, train),
                              format="parquet")
        cards[train] = score(path, test).aggregates
    wide, narrow = cards["train"], cards["train-local"]
    # the same ridge regression, fitted on the narrow box, solves fewer samples and misses the
    # optimal cost by more on loadings spread over the feasible region
    assert narrow["solved_share"] < wide["solved_share"]
    assert abs(narrow["raw_gap_pct"]["mean"]) > abs(wide["raw_gap_pct"]["mean"])
