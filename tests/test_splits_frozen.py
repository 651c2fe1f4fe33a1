"""The frozen splits in splits/: present, intact, and reproducible by a fresh solve."""

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from flowgauge.cli import main
from flowgauge.network import to_ppc
from flowgauge.opf import ACOPF, OPFSettings
from flowgauge.splits import SPLIT_NAMES, list_splits, load_split, splits_root, verify_split

# The plan is the freezing tool's own (tools/freeze_splits.py): networks, splits and counts.
_spec = importlib.util.spec_from_file_location("freeze_splits", Path(__file__).resolve().parents[1] / "tools" / "freeze_splits.py")
PLAN = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(PLAN)
NETWORKS = tuple(PLAN.NETWORKS) + tuple(PLAN.LARGE)
LARGE = set(PLAN.LARGE)
FROZEN = list_splits()


def _ids(path):
    return f"{path.parent.name}/{path.name}"


def test_every_network_has_every_split():
    have = {(p.parent.name, p.name) for p in FROZEN}
    # the training splits of the large systems are committed as recipes only (not as data)
    missing = [f"{n}/{s}" for n in NETWORKS for s in PLAN.splits_of(n)
               if PLAN.committed_data(n, s) and (n, s) not in have]
    assert set(s for n in NETWORKS for s in PLAN.splits_of(n)) <= set(SPLIT_NAMES)
    assert not missing, f"frozen splits missing under {splits_root()}: {missing}"


@pytest.mark.parametrize("path", FROZEN, ids=_ids)
def test_frozen_split_verifies_and_counts_match_the_plan(path):
    r = verify_split(path)
    assert r.references_present
    m = load_split(path, references=False).manifest
    plan = PLAN.planned(r.network, r.split)
    assert r.samples == plan or (r.samples < plan and str(plan) in m["notes"])
    assert m["draws"] == r.samples + sum(m["rejected"].values())


@pytest.mark.parametrize("path", FROZEN, ids=_ids)
def test_fresh_solves_agree_with_frozen_references(path):
    s = load_split(path)
    solver = ACOPF(s.network, OPFSettings())
    refs = s.references
    assert set(refs.status.tolist()) == {"converged"}
    # one sample on the large systems (a 2,000-bus solve takes seconds), two elsewhere
    for i in ([0] if s.network_name in LARGE else sorted({0, s.n_samples // 2})):
        # a sample with an outage is solved on its own network (network_in_state)
        res = (ACOPF(s.state_network(i), OPFSettings()) if s.has_states else solver).solve(s.pd_mw[i], s.qd_mvar[i])
        assert res.status == "converged"
        # solver tolerance: cost_tol 1e-6 relative; voltages to feasibility tolerance
        assert res.objective == pytest.approx(refs.objective[i], rel=1e-5)
        np.testing.assert_allclose(res.vm_pu, refs.vm_pu[i], atol=2e-3)


# ieee300 is left to the re-solve above: PYPOWER takes ~10 s on it, over this area's test budget
# (and the large systems: tests/test_opf_large.py checks their solver against PYPOWER and Ipopt)
@pytest.mark.parametrize("path", [p for p in FROZEN if p.name == "test-id" and p.parent.name != "ieee300"
                                  and p.parent.name not in LARGE], ids=_ids)
def test_frozen_references_match_pypower(path):
    from pypower.api import ppoption, runopf
    s = load_split(path)
    # reference library: PYPOWER 5.1.21 runopf on the first frozen loading
    r = runopf(to_ppc(s.network, s.pd_mw[0], s.qd_mvar[0]), ppoption(VERBOSE=0, OUT_ALL=0))
    assert r["success"]
    assert s.references.objective[0] == pytest.approx(r["f"], rel=1e-4)


def test_edge_split_records_margins_and_more_binding_limits():
    edge, ident = load_split("ieee118", "test-edge"), load_split("ieee118", "test-id")
    m = edge.references.margin
    assert np.all((m >= 0.002) & (m <= 0.03))  # design range in docs/splits.md
    assert np.all(np.isnan(ident.references.margin))
    n_edge = np.mean([len(b) for b in edge.references.binding])
    n_id = np.mean([len(b) for b in ident.references.binding])
    assert n_edge > n_id


def test_verify_without_paths_checks_every_frozen_split(capsys):
    assert main(["splits", "verify"]) == 0
    out = capsys.readouterr().out
    assert out.count("ok  ") == len(FROZEN)
