"""How the restoration's limit checks are split into blocks of samples is an execution detail:
the same values, to the bit, whatever the block size (property: every check is row by row,
docs/powerflow.md, "Scale")."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import flowgauge.scoring._restoration as restoration
from flowgauge.network import load_network
from flowgauge.scoring import REACTIVE_LIMITS_PROFILE, STRICT_PROFILE, restore


def _inputs(net, n, seed):
    rng = np.random.default_rng(seed)
    scale = rng.uniform(0.8, 1.2, (n, net.n_load))
    scale[3] *= 4.0  # far beyond what the network carries: this sample does not converge
    pg = net.pg_mw * rng.uniform(0.9, 1.1, (n, net.n_gen))
    return dict(pd_mw=net.pd_mw * scale, qd_mvar=net.qd_mvar * scale, pg_mw=pg,
                vm_pu=np.broadcast_to(net.vm_pu, (n, net.n_bus)).copy())


def _flat(r):
    out = {}
    for k, v in vars(r).items():
        if isinstance(v, dict):
            out.update({f"{k}.{name}": a for name, a in v.items()})
        elif v is not None:
            out[k] = v
    return out


@pytest.mark.parametrize("profile", [STRICT_PROFILE, REACTIVE_LIMITS_PROFILE], ids=lambda p: p.name)
def test_judging_in_blocks_changes_nothing(monkeypatch, profile):
    net = load_network("ieee118")
    args = _inputs(net, 25, 4)
    whole = restore(net, profile=profile, **args)
    assert not whole.converged[3] and whole.converged.sum() > 20  # both paths of the checks are used
    monkeypatch.setattr(restoration, "JUDGE_ROWS", 4)  # 25 samples: 6 blocks of 4 and one of 1
    blocks = restore(net, profile=profile, **args)
    a, b = _flat(whole), _flat(blocks)
    assert a.keys() == b.keys()
    for k in a:
        np.testing.assert_array_equal(b[k], a[k], err_msg=k)


@pytest.mark.parametrize("profile", [STRICT_PROFILE, REACTIVE_LIMITS_PROFILE], ids=lambda p: p.name)
def test_judging_chunks_on_arrival_changes_nothing(profile):
    # the scorer's way (keep_state=False, chunks of 8 here: 4 chunks) against the whole state kept
    net = load_network("ieee118")
    args = _inputs(net, 25, 5)
    prof = dataclasses.replace(profile, powerflow={**profile.powerflow, "chunk_samples": 8})
    whole = restore(net, profile=prof, **args)
    lean = restore(net, profile=prof, keep_state=False, **args)
    assert not whole.converged[3] and whole.converged.sum() > 20
    assert lean.vm_pu is None and lean.sf_mva is None
    a, b = _flat(whole), _flat(lean)
    for k in ("vm_pu", "va_deg", "qg_mvar", "sf_mva", "st_mva"):
        a.pop(k)
    assert a.keys() == b.keys()
    for k in a:
        np.testing.assert_array_equal(b[k], a[k], err_msg=k)
