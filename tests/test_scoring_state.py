"""Scoring splits whose samples run with elements out of service (scoring/_state.py): the
restoration power flow against PYPOWER 5.1.21 ``runpf`` on the case with the element's row
deleted, the reference on such a split, a prediction that ignores the outage, worker-count
independence and bad state flags."""

from __future__ import annotations

import functools
import json
import warnings
from dataclasses import replace
from pathlib import Path

import jsonschema
import numpy as np
import pytest

from flowgauge.cli import main
from flowgauge.network import load_network, network_in_state, to_ppc
from flowgauge.scoring import REACTIVE_LIMITS_PROFILE, STRICT_PROFILE, score
from flowgauge.splits import load_split
from flowgauge.submission import write_predictions

from test_scoring_support import MODEL, _root, split_copy_with_states, write_reference

PP_OPTIONS = dict(VERBOSE=0, OUT_ALL=0)
SCHEMA = json.loads((Path(__file__).parents[1] / "src/flowgauge/schema/scorecard.schema.json")
                    .read_text())

# ieee14 (PYPOWER case14): branch 0 is line 1-2, generator 1 sits at PV bus 2; neither outage
# islands the network (docs/topology.md, single-outage table).
BRANCH, GEN = 0, 1
ROWS = 12  # rows 0-3 branch 0 out, rows 4-7 generator 1 out, rows 8-11 intact
# rows of the frozen ieee14 test-id split taken (its row 7 has no AC-OPF solution without
# generator 1, so it is skipped)
SRC_ROWS = np.r_[0:7, 8:13]


def _flags(net, n=ROWS):
    br = np.ones((n, net.n_branch), bool)
    gen = np.ones((n, net.n_gen), bool)
    br[0:4, BRANCH] = False
    gen[4:8, GEN] = False
    return br, gen


@functools.lru_cache(maxsize=None)
def state_split_path():
    """A 12-sample split with states from the frozen ieee14 test-id loadings (rows SRC_ROWS),
    references solved on each state network."""
    from flowgauge.baselines._maintenance import split_with_states
    src = load_split("ieee14", "test-id")
    out = _root() / "state" / "ieee14" / "test-id"
    br, gen = _flags(src.network)
    split_with_states(src, out, br, gen, rows=SRC_ROWS, notes="scoring tests: outages")
    return out


@pytest.fixture(scope="module")
def sp():
    s = load_split(state_split_path())
    assert s.n_samples == ROWS and s.has_states  # every sample solvable on its state (checked here)
    return s


@pytest.fixture(scope="module")
def intact():
    return load_split("ieee14", "test-id")


def _runpf(net, pd, qd, pg, vm, table=None, pos=None):
    """PYPOWER runpf on the case from setpoints pg (n_gen,) [MW] and the voltages vm [p.u.] at
    the generator buses, then row ``pos`` of ``table`` deleted (a generator's setpoint with it)."""
    from pypower.api import ppoption, runpf
    ppc = to_ppc(net, pd, qd)
    ppc["gen"][:, 1] = pg
    ppc["gen"][:, 5] = vm[net.gen_bus_idx]
    ppc["bus"][:, 7] = vm
    if table == "branch":
        ppc["branch"] = np.delete(ppc["branch"], pos, axis=0)
    elif table == "generator":
        ppc["gen"] = np.delete(ppc["gen"], pos, axis=0)
        ppc["gencost"] = np.delete(ppc["gencost"], pos, axis=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref, ok = runpf(ppc, ppoption(**PP_OPTIONS))
    assert ok
    return ref


def _cost_from_case(ref) -> float:
    """Hand: the polynomial cost of PYPOWER's result dispatch from its gencost rows (model 2,
    coefficients highest order first)."""
    total = 0.0
    for row, pg in zip(ref["gencost"], ref["gen"][:, 1]):
        n = int(row[3])
        total += float(np.polyval(row[4:4 + n], pg))
    return total


def _restore(sp, pg, vm, profile=STRICT_PROFILE):
    from flowgauge.scoring._state import restore_in_states, state_groups
    groups = state_groups(sp.network, sp.branch_in_service, sp.gen_in_service, sp.sample_id)
    return restore_in_states(sp.network, groups, pd_mw=sp.pd_mw, qd_mvar=sp.qd_mvar, pg_mw=pg, vm_pu=vm,
                             profile=profile)


@pytest.mark.parametrize("row,table,pos", [(0, "branch", BRANCH), (5, "generator", GEN), (9, None, None)])
def test_restoration_on_an_outage_matches_pypower_runpf(sp, row, table, pos):
    # setpoints: the state's reference with a 2 % shift of every dispatch and +0.005 p.u. on
    # every voltage (made up, so the power flow has work to do)
    net = sp.network
    pg = sp.references.pg_mw * 1.02
    vm = sp.references.vm_pu + 0.005
    rest = _restore(sp, pg, vm)
    assert rest.converged[row]
    keep = np.arange(net.n_gen) if table != "generator" else np.delete(np.arange(net.n_gen), pos)
    ref = _runpf(net, sp.pd_mw[row], sp.qd_mvar[row], pg[row], vm[row], table, pos)
    # reference library: PYPOWER runpf on the case without the element, same setpoints
    np.testing.assert_allclose(rest.vm_pu[row], ref["bus"][:, 7], atol=1e-6)
    np.testing.assert_allclose(rest.va_deg[row], ref["bus"][:, 8], atol=1e-5)
    np.testing.assert_allclose(rest.pg_mw[row][keep], ref["gen"][:, 1], atol=1e-4)
    if table == "generator":  # hand: a generator out produces nothing after restoration
        assert rest.pg_mw[row][pos] == 0.0 and rest.qg_mvar[row][pos] == 0.0
    if table == "branch":  # hand: a branch out carries nothing
        assert rest.sf_mva[row][pos] == 0.0 and rest.st_mva[row][pos] == 0.0
    assert rest.cost_per_h[row] == pytest.approx(_cost_from_case(ref), rel=1e-8)


def test_reference_generator_out_hands_the_balance_to_the_one_in_service():
    # demo: generators 0 and 1 share the reference bus 1 (network data, docs/networks.md). With
    # generator 0 out, generator 1 takes the balance, as in PYPOWER runpf without generator 0.
    from flowgauge.network import intact_state
    from flowgauge.powerflow import solve_powerflow, solve_powerflow_batch
    net = load_network("demo")
    br, gen = intact_state(net)
    gen[0] = False
    state_net = network_in_state(net, br, gen)
    res = solve_powerflow(state_net)
    ppc = to_ppc(net)
    ppc["gen"] = np.delete(ppc["gen"], 0, axis=0)
    ppc["gencost"] = np.delete(ppc["gencost"], 0, axis=0)
    from pypower.api import ppoption, runpf
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref, ok = runpf(ppc, ppoption(**PP_OPTIONS))
    assert ok and res.converged
    # reference library: PYPOWER runpf, the generator's row deleted
    np.testing.assert_allclose(res.pg_mw[1:], ref["gen"][:, 1], atol=1e-6)
    np.testing.assert_allclose(res.vm_pu, ref["bus"][:, 7], atol=1e-6)
    assert res.pg_mw[0] == 0.0
    batch = solve_powerflow_batch(state_net, pd_mw=net.pd_mw[None, :], qd_mvar=net.qd_mvar[None, :])
    np.testing.assert_allclose(batch.pg_mw[0, 1:], ref["gen"][:, 1], atol=1e-6)


def test_reference_prediction_on_an_outage_split_scores_zero_gap(sp, tmp_path):
    path = write_reference(sp, tmp_path / "ref.json")
    card = score(path, sp)
    a, doc = card.aggregates, card.to_dict()
    # the reference solution is the optimum of each sample's own state network: raw gap 0 up to
    # the 10-significant-digit file (as for intact splits), no restoration failure
    assert max(abs(a["raw_gap_pct"]["max"]), abs(a["raw_gap_pct"]["mean"])) < 1e-7
    assert a["restoration_failure_rate"] == 0.0
    assert np.abs(card.per_sample["restored_gap_pct"]).max() < 1e-4
    assert doc["format_version"] == 3
    # hand: the split's rows, 4 of each kind (fixture)
    by = a["by_outage"]
    assert {k: v["samples"] for k, v in by.items()} == {"branch out": 4, "generator out": 4, "intact": 4}
    assert all(v["restoration_failure_rate"] == 0.0 for v in by.values())
    assert doc["per_sample"]["outage"] == ["branch out"] * 4 + ["generator out"] * 4 + ["intact"] * 4
    jsonschema.validate(doc, SCHEMA)  # the published schema of format 3 (with grading)
    bad = {**doc, "aggregates": {k: v for k, v in a.items() if k != "by_outage"}}
    with pytest.raises(jsonschema.ValidationError, match="by_outage"):
        jsonschema.validate(bad, SCHEMA)
    from flowgauge.scoring import read_scorecard
    out = card.write(tmp_path / "card.json")
    assert read_scorecard(out)["scorecard_hash"] == doc["scorecard_hash"]


def test_a_prediction_that_ignores_the_outage_is_scored_on_the_outage_network(sp, intact, tmp_path):
    # the intact network's references for the same loadings (the frozen split's first rows):
    # what a proxy that never saw outages would say
    assert np.array_equal(sp.pd_mw, intact.pd_mw[SRC_ROWS])
    pg, vm = intact.references.pg_mw[SRC_ROWS], intact.references.vm_pu[SRC_ROWS]
    path = tmp_path / "ignores.json"
    write_predictions(sp, pg_mw=pg, vm_pu=vm, model=MODEL, path=path)
    card = score(path, sp, profile="strict")
    jsonschema.validate(card.to_dict(), SCHEMA)  # format 3 without grading
    assert card.to_dict()["format_version"] == 3 and "severity" not in card.to_dict()["per_sample"]
    assert set(card.aggregates["by_outage"]["generator out"]) == {
        "samples", "restoration_failure_rate", "restoration_failure_causes", "raw_gap_pct", "restored_gap_pct"}
    t = card.per_sample
    net = sp.network
    for row, table, pos in ((1, "branch", BRANCH), (6, "generator", GEN)):
        ref = _runpf(net, sp.pd_mw[row], sp.qd_mvar[row], pg[row], vm[row], table, pos)
        whole = _runpf(net, sp.pd_mw[row], sp.qd_mvar[row], pg[row], vm[row])
        # reference library: PYPOWER runpf on the case without the element, same setpoints (the
        # predicted output of the generator out is dropped with its row)
        assert t["restored_cost_per_h"][row] == pytest.approx(_cost_from_case(ref), rel=1e-8)
        # ... which is not what the intact case gives from the same setpoints
        assert abs(_cost_from_case(whole) - _cost_from_case(ref)) > 1.0
    # hand: generator 1 is out in rows 4-7 with limits [0, 0]; its predicted output (the intact
    # optimum, above 0) is the raw active-power violation, the largest of any generator there
    # (the others' predictions are within their limits)
    raw = t["raw_active_power_mw"].to_numpy()
    np.testing.assert_allclose(raw[4:8], pg[4:8, GEN], rtol=1e-12)
    assert (pg[4:8, GEN] > 1.0).all() and (raw[8:] < 1e-6).all()


def test_scorecards_are_the_same_bytes_for_one_and_two_workers_and_dask(sp, intact, tmp_path):
    path = tmp_path / "ignores.json"
    write_predictions(sp, pg_mw=intact.references.pg_mw[SRC_ROWS] * 1.01, vm_pu=intact.references.vm_pu[SRC_ROWS],
                      model=MODEL, path=path)
    prof = replace(REACTIVE_LIMITS_PROFILE, powerflow={**REACTIVE_LIMITS_PROFILE.powerflow, "chunk_samples": 3})
    # chunks of 3 samples: several chunks per state, so two workers really share the work
    one = score(path, sp, profile=prof, workers=1).to_bytes()
    two = score(path, sp, profile=prof, workers=2).to_bytes()
    assert one == two
    from distributed import LocalCluster
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        dask = score(path, sp, profile=prof, scheduler=cluster.scheduler_address).to_bytes()
    assert dask == one


def _damaged(sp, tmp_path, br, gen):
    """A copy of the split with other flags, its manifest sealed again (so only the flags are wrong)."""
    return split_copy_with_states(sp, tmp_path / "ieee14" / "test-id", br, gen)


def test_bad_flags_in_a_split_are_one_clear_error(sp, tmp_path, capsys):
    pred = write_reference(sp, tmp_path / "ref.json")
    # wrong length: 19 branch flags where ieee14 has 20 branches
    short = _damaged(sp, tmp_path / "short", sp.branch_in_service[:, :19], sp.gen_in_service)
    assert main(["score", str(pred), "--split", str(short)]) == 2
    err = capsys.readouterr().err
    # the first sample is named (every sample of this damaged split is short)
    assert f"sample {int(sp.sample_id[0])}: column branch_in_service" in err and "expected 20 flags" in err
    assert "Traceback" not in err and len(err.strip().splitlines()) <= 2
    # a state that islands bus 8 (branch 13, 7-8, is its only connection: case14 data)
    br = sp.branch_in_service.copy()
    br[2, 13] = False
    islanded = _damaged(sp, tmp_path / "island", br, sp.gen_in_service)
    (tmp_path / "island.json").write_bytes(pred.read_bytes().replace(
        sp.split_hash.encode(), load_split(islanded).split_hash.encode()))
    assert main(["score", str(tmp_path / "island.json"), "--split", str(islanded)]) == 2
    err = capsys.readouterr().err
    assert "sample 2: branch 13 (id 14): islanding: bus 7 (id 8) cut off" in err
    assert "Traceback" not in err and len(err.strip().splitlines()) <= 2
    assert not (tmp_path / "island.scorecard.json").exists()


def test_a_single_outage_split_from_the_builder_scores_its_reference_at_zero_gap(tmp_path):
    # the builder's test-n1 design (one branch or generator out per sample, references solved on
    # each state network): its own references are the optimum of each sample's network
    from flowgauge.splits import build_split
    build_split("ieee14", "test-n1", samples=8, seed=3, out=tmp_path / "ieee14" / "test-n1", train=False)
    s = load_split(tmp_path / "ieee14" / "test-n1")
    assert s.has_states
    card = score(write_reference(s, tmp_path / "ref.json"), s)
    a = card.aggregates
    assert card.to_dict()["format_version"] == 3
    assert max(abs(a["raw_gap_pct"]["max"]), abs(a["raw_gap_pct"]["mean"])) < 1e-6
    assert a["restoration_failure_rate"] == 0.0
    # hand: every sample has exactly one element out, so the kinds are those two, counted from the flags
    n_branch_out = int((~s.branch_in_service).any(axis=1).sum())
    assert {k: v["samples"] for k, v in a["by_outage"].items()} == {
        k: v for k, v in (("branch out", n_branch_out), ("generator out", 8 - n_branch_out)) if v}
