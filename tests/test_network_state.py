"""Per-sample network states (network/_state.py) against outside references: PYPOWER 5.1.21
``runopf`` / ``runpf`` on the case dict with the element's row deleted, networkx for islanding
facts, and PYPOWER's case14 data for the graph view."""

from __future__ import annotations

import warnings

import networkx as nx
import numpy as np
import pytest

from flowgauge.errors import InputError
from flowgauge.network import load_network, to_ppc
from flowgauge.network._state import (EDGE_FEATURES, ISLAND_WITHOUT_GENERATION, ISLANDING,
                                      NODE_FEATURES, REFERENCE_WITHOUT_GENERATION, check_state,
                                      intact_state, network_in_state, sample_graph, single_outages,
                                      state_problem)
from flowgauge.opf import ACOPF
from flowgauge.powerflow import solve_powerflow

PP_OPTIONS = dict(VERBOSE=0, OUT_ALL=0)


@pytest.fixture(scope="module")
def nets():
    return {n: load_network(n) for n in ("ieee14", "ieee57", "ieee118", "demo")}


def _outage(net, table: str, pos: int):
    """(state network, PYPOWER case with that row deleted): the case dict is the independent
    reference, built without flowgauge's state code."""
    br, gen = intact_state(net)
    ppc = to_ppc(net)
    if table == "branch":
        br[pos] = False
        ppc["branch"] = np.delete(ppc["branch"], pos, axis=0)
    else:
        gen[pos] = False
        ppc["gen"] = np.delete(ppc["gen"], pos, axis=0)
        ppc["gencost"] = np.delete(ppc["gencost"], pos, axis=0)
    return network_in_state(net, br, gen, sample=0), ppc


# ---- AC-OPF and power flow against PYPOWER with the element removed -------------------------

# ieee14: branch 0 is 1-2, generator 1 sits at PV bus 2 (PYPOWER case14); ieee118: branch 40 and
# generator 20 (at bus 49, PYPOWER case118) are ordinary, non-islanding outages.
OPF_CASES = [("ieee14", "branch", 0), ("ieee14", "generator", 1), ("ieee118", "branch", 40),
             ("ieee118", "generator", 20)]


@pytest.mark.parametrize("name,table,pos", OPF_CASES)
def test_acopf_on_an_outage_matches_pypower_runopf_without_the_element(nets, name, table, pos):
    from pypower.api import ppoption, runopf
    net = nets[name]
    state_net, ppc = _outage(net, table, pos)
    res = ACOPF(state_net).solve()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = runopf(ppc, ppoption(**PP_OPTIONS))
    assert ref["success"] and res.status == "converged"
    # reference library: PYPOWER runopf on the case with the row deleted
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)
    keep = np.delete(np.arange(net.n_gen), pos) if table == "generator" else np.arange(net.n_gen)
    np.testing.assert_allclose(res.pg_mw[keep], ref["gen"][:, 1], atol=0.2)
    np.testing.assert_allclose(res.vm_pu, ref["bus"][:, 7], atol=2e-3)
    if table == "generator":  # hand: a generator out has bounds [0, 0]
        assert res.pg_mw[pos] == 0.0 and res.qg_mvar[pos] == 0.0


PF_CASES = [("ieee14", "branch", 0), ("ieee14", "branch", 4), ("ieee14", "generator", 1),
            ("ieee118", "branch", 100), ("ieee118", "generator", 3),
            # demo: generator 3 shares PV bus 5 with generator 2 (the bus stays PV)
            ("demo", "generator", 3)]


@pytest.mark.parametrize("name,table,pos", PF_CASES)
def test_powerflow_on_an_outage_matches_pypower_runpf_without_the_element(nets, name, table, pos):
    from pypower.api import ppoption, runpf
    net = nets[name]
    state_net, ppc = _outage(net, table, pos)
    res = solve_powerflow(state_net)  # setpoints: the case's pg_mw and vg_pu
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref, ok = runpf(ppc, ppoption(**PP_OPTIONS))
    assert ok and res.converged
    # reference library: PYPOWER runpf from the same setpoints, the row deleted
    np.testing.assert_allclose(res.vm_pu, ref["bus"][:, 7], atol=1e-6)
    np.testing.assert_allclose(res.va_deg, ref["bus"][:, 8], atol=1e-5)
    keep = np.delete(np.arange(net.n_gen), pos) if table == "generator" else np.arange(net.n_gen)
    np.testing.assert_allclose(res.pg_mw[keep], ref["gen"][:, 1], atol=1e-4)
    np.testing.assert_allclose(res.qg_mvar[keep], ref["gen"][:, 2], atol=1e-4)
    if table == "branch":  # hand: a branch out carries nothing
        assert res.pf_mw[pos] == 0.0 and res.qt_mvar[pos] == 0.0


def test_demo_first_reference_generator_out_keeps_voltages(nets):
    # The reference bus of demo holds generators 0 and 1 (network data). With generator 0 out,
    # voltages and every generator's output match PYPOWER runpf without it (the balance goes to
    # the first in-service generator of the reference bus, docs/topology.md).
    from pypower.api import ppoption, runpf
    state_net, ppc = _outage(nets["demo"], "generator", 0)
    res = solve_powerflow(state_net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref, ok = runpf(ppc, ppoption(**PP_OPTIONS))
    assert ok and res.converged
    np.testing.assert_allclose(res.vm_pu, ref["bus"][:, 7], atol=1e-6)
    np.testing.assert_allclose(res.va_deg, ref["bus"][:, 8], atol=1e-5)
    # PYPOWER's case has generator 0's row deleted: our generator k > 0 is its row k - 1
    np.testing.assert_allclose(res.pg_mw[1:], ref["gen"][:, 1], atol=1e-6)
    assert res.pg_mw[0] == 0.0


def test_generator_out_zeroes_its_data_and_a_lone_pv_bus_becomes_pq(nets):
    net = nets["ieee14"]
    br, gen = intact_state(net)
    gen[1] = False  # PYPOWER case14: generator at bus 2, a PV bus with one generator
    s = network_in_state(net, br, gen)
    for name in ("pmin_mw", "pmax_mw", "qmin_mvar", "qmax_mvar", "pg_mw", "qg_mvar", "cost_c2", "cost_c1", "cost_c0"):
        assert getattr(s, name)[1] == 0.0, name
    assert s.bus_type[1] == 1  # common practice: a PV bus without a generator in service is PQ
    assert s.n_gen == net.n_gen and s.n_branch == net.n_branch  # same shapes, same order
    np.testing.assert_array_equal(s.gen_id, net.gen_id)
    # the others are untouched (case14 data: the bus-1 generator's Pmax is 332.4 MW)
    assert s.pmax_mw[0] == 332.4 and s.bus_type[0] == 3
    assert network_in_state(net, *intact_state(net)) is net


# ---- islanding against networkx ----------------------------------------------------------

def _multigraph(net):
    g = nx.MultiGraph()
    g.add_nodes_from(range(net.n_bus))
    on = np.flatnonzero(net.in_service)
    g.add_edges_from((int(net.f_idx[i]), int(net.t_idx[i]), int(i)) for i in on)
    return g


@pytest.mark.parametrize("name", ["ieee14", "ieee57", "ieee118", "demo"])
def test_islanding_branch_outages_are_the_bridges_networkx_finds(nets, name):
    net = nets[name]
    g = _multigraph(net)
    # reference library: networkx bridges (parallel branches are never bridges)
    bridges = {frozenset(e) for e in nx.bridges(g)}
    expected = sorted(i for i in range(net.n_branch)
                      if frozenset((int(net.f_idx[i]), int(net.t_idx[i]))) in bridges)
    so = single_outages(net)
    got = sorted(r.position for r in so.rejected if r.table == "branch" and r.reason == ISLANDING)
    assert got == expected
    assert sorted(so.branches.tolist()) == sorted(set(range(net.n_branch)) - set(expected))
    assert so.counts().get(ISLANDING, 0) == len(expected)


def test_islanding_names_the_buses_networkx_sees_cut_off(nets):
    net = nets["ieee118"]
    so = single_outages(net)
    ref_bus = int(net.ref_idx[0])
    for r in [r for r in so.rejected if r.reason == ISLANDING]:
        g = _multigraph(net)
        g.remove_edge(int(net.f_idx[r.position]), int(net.t_idx[r.position]), key=r.position)
        # reference library: networkx connected components after removing the branch
        cut = [c for c in nx.connected_components(g) if ref_bus not in c]
        assert len(cut) == 1
        members = sorted(cut[0])
        assert f"{members[0]} (id {int(net.bus_id[members[0]])})" in r.message
        listed = ", ".join(f"{b} (id {int(net.bus_id[b])})" for b in members)
        if len(members) == 1:
            assert f"islanding: bus {listed} cut off" in r.message
        elif len(members) <= 8:
            assert f"islanding: buses {listed} cut off" in r.message
        else:
            assert f"({len(members)} in all) cut off" in r.message


def test_outage_of_a_bus_only_connection_is_one_error_naming_sample_and_branch(nets):
    net = nets["ieee14"]
    # PYPOWER case14: bus 8 (position 7) is reached only by branch 7-8, the 14th branch (id 14)
    br, gen = intact_state(net)
    br[13] = False
    with pytest.raises(InputError, match=r"islanding: bus 7 \(id 8\) cut off") as exc:
        network_in_state(net, br, gen, sample=42)
    assert exc.value.where == "sample 42: branch 13 (id 14)"


def test_reference_bus_left_without_generation_is_refused(nets):
    net = nets["ieee14"]
    br, gen = intact_state(net)
    gen[0] = False  # PYPOWER case14: the only generator at reference bus 1
    with pytest.raises(InputError, match=r"reference bus without generation: reference bus 0 \(id 1\)") as exc:
        network_in_state(net, br, gen, sample=3)
    assert exc.value.where == "sample 3: generator 0 (id 1)"
    so = single_outages(net)
    assert [(r.table, r.position, r.reason) for r in so.rejected if r.table == "generator"] == [
        ("generator", 0, REFERENCE_WITHOUT_GENERATION)]


def test_island_without_generation_is_refused(nets):
    # hand-built: ieee14 with branch 7-8 out and bus 8 (a synchronous condenser, case14) made
    # the reference bus of its own island; taking its generator out leaves that island empty
    net = nets["ieee14"]
    on = np.array(net.in_service, bool)
    on[13] = False
    bus_type = np.array(net.bus_type)
    bus_type[7] = 3
    two = net.replace(in_service=on, bus_type=bus_type)
    g8 = int(np.flatnonzero(net.gen_bus == 8)[0])
    gen = np.ones(net.n_gen, bool)
    gen[g8] = False
    p = state_problem(two, on, gen)
    assert p is not None and p.reason == ISLAND_WITHOUT_GENERATION
    assert "bus 7 (id 8)" in p.message
    with pytest.raises(InputError, match="island without generation"):
        network_in_state(two, on, gen, sample=1)


# ---- bad flags ---------------------------------------------------------------------------

def test_bad_flags_give_one_message_naming_sample_and_element(nets):
    net = nets["ieee14"]
    br, gen = intact_state(net)
    with pytest.raises(InputError, match=r"expected 20 flags \(one per branch.*got shape \(19,\)") as exc:
        check_state(net, br[:-1], gen, sample=5)
    assert exc.value.where == "sample 5: branch_in_service"
    with pytest.raises(InputError, match=r"expected true/false flags \(bool\), got values of dtype float64") as exc:
        check_state(net, br, gen.astype(float), sample=5)
    assert exc.value.where == "sample 5: gen_in_service"
    bad = gen.astype(int)
    bad[2] = 2
    with pytest.raises(InputError, match="expected true/false \\(or 1/0\\), got 2") as exc:
        check_state(net, br, bad, sample=5)
    assert exc.value.where == "sample 5: gen_in_service, generator 2 (id 3)"
    with pytest.raises(InputError, match="dtype <U"):
        check_state(net, br.astype(str), gen, sample=5)
    b, g = check_state(net, br.astype(int), gen.astype(np.int8))
    assert b.dtype == bool and g.dtype == bool and b.all() and g.all()
    # a branch out in the network cannot be put back by a state
    on = np.array(net.in_service)
    on[4] = False
    out_net = net.replace(in_service=on)
    with pytest.raises(InputError, match="out of service in the network") as exc:
        check_state(out_net, np.ones(net.n_branch, bool), gen, sample=9)
    assert exc.value.where == "sample 9: branch_in_service, branch 4 (id 5)"


# ---- graph view --------------------------------------------------------------------------

def test_graph_view_against_networkx_and_case14_data(nets):
    from pypower.case14 import case14
    net = nets["ieee14"]
    c = case14()  # PYPOWER case14: the published data
    br, gen = intact_state(net)
    br[0] = False  # branch 1-2 out
    gen[1] = False  # the bus-2 generator out
    view = sample_graph(net, br, net.pd_mw, net.qd_mvar, gen)
    assert view.edge_index.shape == (19, 2) and view.edge_index.dtype == np.int64
    assert view.edge_features.shape == (19, len(EDGE_FEATURES))
    assert view.node_features.shape == (14, len(NODE_FEATURES))
    g = _multigraph(net)
    g.remove_edge(0, 1, key=0)
    # reference library: networkx degree on the same graph; case14: bus 2 joins 1, 3, 4, 5
    deg = np.bincount(view.edge_index.ravel(), minlength=14)
    assert deg[1] == g.degree(1) == 3
    np.testing.assert_array_equal(deg, [g.degree(i) for i in range(14)])
    # case14 branch 8 (4-7 transformer): r 0, x 0.20912, b 0, rateA 9900, ratio 0.978, angle 0
    row = int(np.flatnonzero(view.edge_branch == 7)[0])
    assert tuple(view.edge_index[row]) == (3, 6)
    expect = c["branch"][7][[2, 3, 4, 5, 8, 9]]
    np.testing.assert_array_equal(view.edge_features[row], expect)
    assert view.edge("tap")[row] == 0.978
    # case14 bus 3: Pd 94.2 MW, Qd 19 MVAr, Vmax 1.06, Vmin 0.94; generator at bus 3: Pmax 100,
    # Qmin 0, Qmax 40
    assert view.node("pd_mw")[2] == c["bus"][2, 2] == 94.2
    assert view.node("qd_mvar")[2] == c["bus"][2, 3]
    assert view.node("vmax_pu")[2] == c["bus"][2, 11] and view.node("vmin_pu")[2] == c["bus"][2, 12]
    assert view.node("pmax_mw")[2] == c["gen"][2, 8] and view.node("qmax_mvar")[2] == c["gen"][2, 3]
    # the bus-2 generator is out: no limits there, and the bus is PQ (common practice)
    assert view.node("pmax_mw")[1] == 0.0 and view.node("qmin_mvar")[1] == 0.0
    assert view.node("bus_type")[1] == 1 and view.node("bus_type")[0] == 3
    # case14 bus 9 carries a 19 MVAr shunt capacitor (Bs)
    assert view.node("bs_mvar")[8] == c["bus"][8, 5] == 19


def test_graph_view_bad_loads_name_the_sample(nets):
    net = nets["ieee14"]
    br, _ = intact_state(net)
    with pytest.raises(InputError, match=r"expected shape \(11,\)") as exc:
        sample_graph(net, br, net.pd_mw[:3], net.qd_mvar, sample=8)
    assert exc.value.where == "sample 8: pd_mw"


# ---- DC-OPF and the load-time checks -----------------------------------------------------

@pytest.mark.parametrize("name,table,pos", [("ieee14", "generator", 1), ("ieee118", "branch", 40),
                                            ("demo", "generator", 0)])
def test_dcopf_on_an_outage_matches_pypower_rundcopf_without_the_element(nets, name, table, pos):
    from pypower.api import ppoption, rundcopf

    from flowgauge.network._checks import check_network
    from flowgauge.opf import solve_dcopf
    net = nets[name]
    state_net, ppc = _outage(net, table, pos)
    check_network(state_net, source="state")  # the load-time checks accept a state network
    res = solve_dcopf(state_net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = rundcopf(ppc, ppoption(**PP_OPTIONS))
    assert ref["success"]
    # reference library: PYPOWER rundcopf on the case with the row deleted
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)
    keep = np.delete(np.arange(net.n_gen), pos) if table == "generator" else np.arange(net.n_gen)
    np.testing.assert_allclose(res.pg_mw[keep], ref["gen"][:, 1], atol=1e-3)


def test_group_states_by_hand():
    # hand: rows 0 and 2 share a state, row 1 and row 3 differ; groups by first appearance
    br = np.array([[1, 1, 1], [1, 0, 1], [1, 1, 1], [1, 1, 1]], bool)
    gen = np.array([[1, 1], [1, 1], [1, 1], [0, 1]], bool)
    from flowgauge.network._state import group_states
    ub, ug, group = group_states(br, gen)
    np.testing.assert_array_equal(group, [0, 1, 0, 2])
    np.testing.assert_array_equal(ub, br[[0, 1, 3]])
    np.testing.assert_array_equal(ug, gen[[0, 1, 3]])


def test_batched_powerflow_on_an_outage_matches_pypower_runpf_per_sample(nets):
    # the scorer's restoration runs the batched solver: two load levels on ieee118 with branch
    # 100 out, each against PYPOWER runpf on the case without that branch at the same loads
    from pypower.api import ppoption, runpf

    from flowgauge.powerflow import solve_powerflow_batch
    net = nets["ieee118"]
    state_net, _ = _outage(net, "branch", 100)
    scale = np.array([[0.9], [1.05]])
    res = solve_powerflow_batch(state_net, pd_mw=net.pd_mw * scale, qd_mvar=net.qd_mvar * scale)
    assert res.converged.all()
    for k in range(2):
        ppc = to_ppc(net, net.pd_mw * scale[k], net.qd_mvar * scale[k])
        ppc["branch"] = np.delete(ppc["branch"], 100, axis=0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref, ok = runpf(ppc, ppoption(**PP_OPTIONS))
        assert ok
        # reference library: PYPOWER runpf, same setpoints and loads
        np.testing.assert_allclose(res.vm_pu[k], ref["bus"][:, 7], atol=1e-6)
        np.testing.assert_allclose(res.va_deg[k], ref["bus"][:, 8], atol=1e-5)


def test_voltage_setpoint_of_a_shared_bus_comes_from_the_generator_left_in_service(nets):
    # hand-built: ieee14 with a sixth generator at bus 2 holding another setpoint (1.03 p.u.,
    # case14's bus-2 generator holds 1.045), listed last so that the power flow's default start
    # would take its setpoint. With it out, the case is case14 itself: PYPOWER runpf on case14.
    from pypower.api import ppoption, runpf
    net = nets["ieee14"]
    gen_fields = ["gen_id", "gen_bus", "pmin_mw", "pmax_mw", "qmin_mvar", "qmax_mvar", "vg_pu", "pg_mw",
                  "qg_mvar", "cost_c2", "cost_c1", "cost_c0"]
    extra = {"gen_id": 6, "gen_bus": 2, "pmin_mw": 0.0, "pmax_mw": 50.0, "qmin_mvar": -20.0, "qmax_mvar": 20.0,
             "vg_pu": 1.03, "pg_mw": 10.0, "qg_mvar": 0.0, "cost_c2": 0.01, "cost_c1": 20.0, "cost_c0": 0.0}
    six = net.replace(**{k: np.append(getattr(net, k), extra[k]).astype(getattr(net, k).dtype) for k in gen_fields})
    gen = np.ones(6, bool)
    gen[5] = False
    state_net = network_in_state(six, six.in_service, gen)
    assert state_net.vg_pu[5] == 1.045  # case14: the bus-2 generator's setpoint
    res = solve_powerflow(state_net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref, ok = runpf(to_ppc(net), ppoption(**PP_OPTIONS))
    assert ok and res.converged
    # reference library: PYPOWER runpf on the case without the sixth generator
    np.testing.assert_allclose(res.vm_pu, ref["bus"][:, 7], atol=1e-6)
    assert res.vm_pu[1] == pytest.approx(1.045, abs=1e-12)


def test_more_bad_flags_and_plain_lists(nets):
    net = nets["ieee14"]
    br, gen = intact_state(net)
    with pytest.raises(InputError, match=r"expected 20 flags .*got shape \(\)") as exc:
        check_state(net, None, gen, sample=0)
    assert exc.value.where == "sample 0: branch_in_service"
    with pytest.raises(InputError, match=r"expected 5 flags .*got shape \(1, 5\)"):
        check_state(net, br, gen[None, :], sample=0)
    with pytest.raises(InputError, match="dtype object"):
        check_state(net, br, [True, False, "x", None, True], sample=0)
    b, g = check_state(net, br.tolist(), [True, True, False, True, True])
    assert g.tolist() == [True, True, False, True, True] and b.all()


def test_same_inputs_give_the_same_arrays(nets):
    # determinism: two calls, identical bytes
    net = nets["ieee118"]
    a, b = single_outages(net), single_outages(net)
    assert a.branches.tobytes() == b.branches.tobytes() and a.rejected == b.rejected
    br, gen = intact_state(net)
    br[40] = False
    v1 = sample_graph(net, br, net.pd_mw, net.qd_mvar, gen)
    v2 = sample_graph(net, br.copy(), net.pd_mw.copy(), net.qd_mvar.copy(), gen.copy())
    for name in ("edge_index", "edge_branch", "edge_features", "node_features"):
        assert getattr(v1, name).tobytes() == getattr(v2, name).tobytes()


def test_binding_labels_of_a_generator_out_are_dropped(nets):
    # ieee14, generator 1 (id 2, bus 2) out: PYPOWER runopf on the case without it has bus 1, 6
    # and 8 at Vmax 1.06 and the bus-1 generator at Qmax 10 MVAr (checked below on its result);
    # the out generator sits at all four of its zero limits and must not add labels.
    from pypower.api import ppoption, runopf

    from flowgauge.network._state import binding_in_state
    from flowgauge.opf._result import binding_signature
    net = nets["ieee14"]
    state_net, ppc = _outage(net, "generator", 1)
    res = ACOPF(state_net).solve()
    assert {"gen:2:pmin", "gen:2:pmax", "gen:2:qmin", "gen:2:qmax"} <= set(res.binding)
    gen = np.ones(5, bool)
    gen[1] = False
    kept = binding_in_state(res.binding, net, gen)
    assert kept == ("bus:1:vmax", "bus:6:vmax", "bus:8:vmax", "gen:1:qmax")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = runopf(ppc, ppoption(**PP_OPTIONS))
    # reference library: PYPOWER runopf's solution sits at exactly these limits (1e-4 p.u. / MVAr)
    vm, vmax = ref["bus"][:, 7], ref["bus"][:, 11]
    assert sorted(int(b) for b in ref["bus"][vmax - vm <= 1e-4, 0]) == [1, 6, 8]
    g = ref["gen"]
    assert g[0, 3] - g[0, 2] <= 1e-2  # case14 generator at bus 1: QG at QMAX
    assert not np.any(np.abs(g[1:, 1] - g[1:, 8]) <= 1e-2)  # no other generator at PMAX
    assert binding_signature(kept) != res.signature


def test_check_states_names_the_first_sample_with_a_refused_state(nets):
    from flowgauge.network._state import check_states
    net = nets["ieee14"]
    br = np.ones((4, 20), bool)
    gen = np.ones((4, 5), bool)
    br[1, 0] = False  # 1-2 out: allowed
    br[2, 13] = br[3, 13] = False  # 7-8 out: bus 8 cut off (case14), rows 2 and 3
    with pytest.raises(InputError, match=r"islanding: bus 7 \(id 8\)") as exc:
        check_states(net, br, gen, np.array([10, 11, 12, 13]))
    assert exc.value.where == "sample 12: branch 13 (id 14)"
    b, g = check_states(net, br[:2], gen[:2], np.array([10, 11]))
    assert b.shape == (2, 20) and g.dtype == bool
    with pytest.raises(InputError, match=r"expected shape \(2, 5\)") as exc:
        check_states(net, br[:2], gen[:2, :4], np.array([10, 11]))
    assert exc.value.where == "gen_in_service"
    with pytest.raises(InputError, match="dtype int64"):
        check_states(net, br[:2].astype(np.int64), gen[:2], np.array([10, 11]))
