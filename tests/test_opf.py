"""AC-OPF, DC-OPF and maximum loadability against PYPOWER (reference library), published optimal
costs and the optimality conditions; statuses on loadings past what a network can carry;
bad input."""

import warnings
from dataclasses import FrozenInstanceError

import numpy as np
import pytest

from flowgauge.errors import InputError
from flowgauge.network import load_network, synthetic, to_ppc
from flowgauge.opf import (ACOPF, LIMIT_NAMES, STATUS_MESSAGES, STATUSES, OPFResult, OPFSettings,
                           max_loadability, solve_acopf, solve_dcopf)

IEEE = ["ieee14", "ieee30", "ieee57", "ieee118", "ieee300"]
# Published optimal costs [$/h] of the AC-OPF on these test systems (MATPOWER/PYPOWER case
# documentation), from memory; rounded to cents, hence the 1e-5 relative tolerance below.
PUBLISHED = {"ieee14": 8081.53, "ieee30": 576.89, "ieee57": 41737.79, "ieee118": 129660.69,
             "ieee300": 719725.08}
PP_OPTIONS = dict(VERBOSE=0, OUT_ALL=0)


@pytest.fixture(scope="module")
def nets():
    return {n: load_network(n) for n in IEEE + ["demo"]}


@pytest.fixture(scope="module")
def solved(nets):
    return {n: solve_acopf(net) for n, net in nets.items()}


@pytest.fixture(scope="module")
def pypower_opf(nets):
    from pypower.api import ppoption, runopf
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {n: runopf(to_ppc(net), ppoption(**PP_OPTIONS)) for n, net in nets.items()}


# ---- AC-OPF against PYPOWER and the published optima -------------------------------------

@pytest.mark.parametrize("name", IEEE + ["demo"])
def test_objective_matches_pypower_runopf(name, solved, pypower_opf):
    res, ref = solved[name], pypower_opf[name]
    assert ref["success"]
    assert res.status == "converged"
    # reference library: PYPOWER 5.1.21 runopf (primal-dual interior point, same formulation)
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)


@pytest.mark.parametrize("name", IEEE)
def test_objective_matches_published_optimum(name, solved):
    # published optimal cost, from memory, rounded to cents
    assert solved[name].objective == pytest.approx(PUBLISHED[name], rel=1e-5)


@pytest.mark.parametrize("name", IEEE + ["demo"])
def test_point_prices_and_multipliers_match_pypower(name, solved, pypower_opf):
    res, ref = solved[name], pypower_opf[name]
    bus, gen, br = ref["bus"], ref["gen"], ref["branch"]
    # reference library: PYPOWER runopf's solved voltages, dispatch, prices and multipliers
    # (columns VM, VA, PG, LAM_P, LAM_Q, MU_SF, MU_ST, MU_VMAX, MU_PMAX, MU_PMIN, MU_QMAX),
    # tolerances from the solvers' stopping tests (1e-6 scaled)
    np.testing.assert_allclose(res.vm_pu, bus[:, 7], atol=2e-3)
    np.testing.assert_allclose(res.va_deg, bus[:, 8], atol=2e-2)
    np.testing.assert_allclose(res.pg_mw, gen[:, 1], atol=0.2)
    np.testing.assert_allclose(res.lmp_per_mwh, bus[:, 13], rtol=1e-4, atol=1e-4 * np.abs(bus[:, 13]).max())
    np.testing.assert_allclose(res.lmq_per_mvarh, bus[:, 14], atol=2e-2)
    pairs = [("rate_from", br[:, 17]), ("rate_to", br[:, 18]), ("vmax", bus[:, 15]), ("pmax", gen[:, 21]),
             ("pmin", gen[:, 22]), ("qmax", gen[:, 23])]
    for key, expected in pairs:
        np.testing.assert_allclose(res.multipliers[key], expected, atol=1e-2 * max(1.0, np.abs(expected).max()),
                                   err_msg=key)


@pytest.mark.parametrize("name", IEEE + ["demo"])
def test_converged_point_meets_every_tolerance(name, solved, nets):
    res, net, st = solved[name], nets[name], OPFSettings()
    assert res.status in STATUSES and res.converged
    assert res.message == STATUS_MESSAGES["converged"]
    assert res.max_p_mismatch_mw <= st.feasibility_tol * net.base_mva
    assert res.max_q_mismatch_mvar <= st.feasibility_tol * net.base_mva
    assert res.max_limit_violation <= st.feasibility_tol * net.base_mva
    assert res.dual_infeasibility <= st.gradient_tol
    assert res.complementarity <= st.complementarity_tol
    # limits checked directly on the returned point (network data; rates in MVA)
    assert np.all(res.vm_pu <= net.vmax_pu + 1e-6) and np.all(res.vm_pu >= net.vmin_pu - 1e-6)
    assert np.all(res.pg_mw <= net.pmax_mw + 1e-4) and np.all(res.pg_mw >= net.pmin_mw - 1e-4)
    assert np.all(res.qg_mvar <= net.qmax_mvar + 1e-4) and np.all(res.qg_mvar >= net.qmin_mvar - 1e-4)
    assert set(res.multipliers) == set(LIMIT_NAMES)
    for key, arr in res.multipliers.items():
        assert np.all(arr >= 0.0), key  # inequality multipliers are non-negative (KKT, common practice)


@pytest.mark.parametrize("name", IEEE + ["demo"])
def test_generator_optimality_conditions(name, solved, nets):
    res, net = solved[name], nets[name]
    bus = net.gen_bus_idx
    # stationarity of the Lagrangian in each generator's output, derived by hand from the
    # quadratic cost c2 P^2 + c1 P + c0 and the balance "injection - generation + load = 0":
    # 2 c2 P + c1 - lmp(bus) - mu_pmin + mu_pmax = 0 and -lmq(bus) - mu_qmin + mu_qmax = 0
    m = res.multipliers
    dp = 2 * net.cost_c2 * res.pg_mw + net.cost_c1 - res.lmp_per_mwh[bus] - m["pmin"] + m["pmax"]
    dq = -res.lmq_per_mvarh[bus] - m["qmin"] + m["qmax"]
    scale = np.abs(res.lmp_per_mwh).max()
    assert np.abs(dp).max() <= 1e-5 * scale
    assert np.abs(dq).max() <= 1e-5 * scale


def test_binding_labels_name_the_limits_pypower_finds_active(solved, pypower_opf, nets):
    res, ref, net = solved["ieee30"], pypower_opf["ieee30"], nets["ieee30"]
    # PYPOWER: branches with a positive flow-limit multiplier are at their rating
    at_rate = set(net.branch_id[(ref["branch"][:, 17] > 1e-3) | (ref["branch"][:, 18] > 1e-3)].tolist())
    ours = {int(lab.split(":")[1]) for lab in res.binding if ":rate_" in lab}
    assert at_rate and ours == at_rate
    assert list(res.binding) == sorted(res.binding, key=lambda s: (("bus", "gen", "branch").index(s.split(":")[0]),
                                                                 int(s.split(":")[1]),
                                                                 list(LIMIT_NAMES).index(s.split(":")[2])))
    assert len(res.signature) == 16 and int(res.signature, 16) >= 0


def test_same_inputs_give_identical_results(nets):
    net = nets["ieee57"]
    rng = np.random.Generator(np.random.PCG64(7))
    f = rng.uniform(0.9, 1.1, net.n_load)
    a = ACOPF(net).solve(net.pd_mw * f, net.qd_mvar * f)
    b = ACOPF(net).solve(net.pd_mw * f, net.qd_mvar * f)
    for key in ("pg_mw", "qg_mvar", "vm_pu", "va_deg", "lmp_per_mwh"):
        assert np.array_equal(getattr(a, key), getattr(b, key)), key
    assert a.objective == b.objective and a.signature == b.signature


def test_warm_start_reaches_the_same_optimum(nets):
    net = nets["ieee118"]
    solver = ACOPF(net)
    base = solver.solve()
    cold = solver.solve(net.pd_mw * 1.05, net.qd_mvar * 1.05)
    warm = solver.solve(net.pd_mw * 1.05, net.qd_mvar * 1.05, start=base)
    assert cold.converged and warm.converged
    # reference: the cold solve (same problem); PYPOWER runopf gives 1.05x too in the benchmark
    assert warm.objective == pytest.approx(cold.objective, rel=1e-7)


# ---- loadings past what the network can carry -------------------------------------------

@pytest.mark.parametrize("name,factor", [("ieee14", 3.0), ("ieee30", 1.1), ("ieee57", 1.1), ("ieee300", 1.1)])
def test_loading_beyond_capacity_is_never_converged(name, factor, nets):
    net = nets[name]
    # ieee30/57/300 at 1.1x: PYPOWER runopf fails and Ipopt reports "Infeasible_Problem_Detected"
    # on the casadi formulation (tests/test_opf_ipopt.py); ieee14 at 3x exceeds its generation
    # capacity (772.4 MW of generation, 259 MW x 3 of load, published case data)
    res = solve_acopf(net, net.pd_mw * factor, net.qd_mvar * factor)
    assert res.status in ("infeasible", "iteration_limit")
    assert res.message == STATUS_MESSAGES[res.status]


@pytest.mark.parametrize("n_bus,seed", [(60, 1), (120, 2)])
def test_synthetic_networks_past_loadability_are_never_converged(n_bus, seed):
    net = synthetic(n_bus, seed)
    lr = max_loadability(net)
    assert lr.converged and lr.lam > 0
    solver = ACOPF(net)
    for k in (1.05, 1.5, 3.0):  # beyond the maximum scale factor
        s = 1.0 + k * lr.lam
        res = solver.solve(net.pd_mw * s, net.qd_mvar * s)
        assert res.status in ("infeasible", "iteration_limit"), (k, res.status)


def test_every_converged_point_of_a_stress_sweep_is_feasible(nets):
    net = nets["ieee57"]
    solver, st = ACOPF(net), OPFSettings()
    rng = np.random.Generator(np.random.PCG64(11))
    statuses = []
    for _ in range(12):  # loadings around and past the 1.08x uniform limit
        f = rng.uniform(0.9, 1.3, net.n_load)
        res = solver.solve(net.pd_mw * f, net.qd_mvar * f)
        statuses.append(res.status)
        if res.converged:
            assert res.max_p_mismatch_mw <= st.feasibility_tol * net.base_mva
            assert res.max_limit_violation <= st.feasibility_tol * net.base_mva
    assert "converged" in statuses and set(statuses) - {"converged"}


# ---- maximum loadability --------------------------------------------------------------------

@pytest.mark.parametrize("name", ["ieee14", "demo"])
def test_at_max_loadability_the_opf_converges_and_just_beyond_it_does_not(name, nets):
    net = nets[name]
    lr = max_loadability(net)
    assert lr.converged and lr.lam > 0
    np.testing.assert_allclose(lr.pd_mw, net.pd_mw * (1 + lr.lam))
    solver = ACOPF(net)
    assert solver.solve(lr.pd_mw, lr.qd_mvar).converged
    s = 1.0 + 1.01 * lr.lam
    assert solver.solve(net.pd_mw * s, net.qd_mvar * s).status in ("infeasible", "iteration_limit")
    assert lr.binding and len(lr.signature) == 16


def test_max_loadability_with_a_load_direction(nets):
    net = nets["ieee14"]
    direction = np.zeros(net.n_load)
    direction[0] = 10.0  # 10 MW more at the first load per unit of lam
    lr = max_loadability(net, dir_pd_mw=direction, dir_qd_mvar=np.zeros(net.n_load))
    assert lr.converged
    np.testing.assert_allclose(lr.pd_mw - net.pd_mw, lr.lam * direction)
    solver = ACOPF(net)
    assert solver.solve(lr.pd_mw, lr.qd_mvar).converged
    beyond = net.pd_mw + 1.01 * lr.lam * direction
    assert not solver.solve(beyond, net.qd_mvar).converged


# ---- DC-OPF -----------------------------------------------------------------------------------

@pytest.mark.parametrize("name", IEEE + ["demo"])
def test_dcopf_objective_matches_pypower_rundcopf(name, nets):
    from pypower.api import ppoption, rundcopf
    net = nets[name]
    res = solve_dcopf(net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = rundcopf(to_ppc(net), ppoption(**PP_OPTIONS))
    assert res.converged and ref["success"]
    # reference library: PYPOWER 5.1.21 rundcopf on the same data
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)
    np.testing.assert_allclose(res.pg_mw, ref["gen"][:, 1], atol=1e-2)
    np.testing.assert_allclose(res.lmp_per_mwh, ref["bus"][:, 13], rtol=1e-4, atol=1e-3)
    assert res.max_p_mismatch_mw <= 1e-6


def test_dcopf_thermal_limit_binds_when_a_rating_is_cut(nets):
    from pypower.api import ppoption, rundcopf
    net = nets["ieee14"]
    base = solve_dcopf(net)
    k = int(np.argmax(np.abs(base.flow_mw)))
    tight = net.replace(rate_mva=np.where(np.arange(net.n_branch) == k, 0.8 * abs(base.flow_mw[k]), net.rate_mva))
    res = solve_dcopf(tight)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = rundcopf(to_ppc(tight), ppoption(**PP_OPTIONS))
    # reference library: PYPOWER rundcopf with the same cut rating
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)
    assert abs(res.flow_mw[k]) == pytest.approx(0.8 * abs(base.flow_mw[k]), rel=1e-6)
    assert any(lab.startswith(f"branch:{int(net.branch_id[k])}:rate_") for lab in res.binding)


# ---- bad input --------------------------------------------------------------------------------

def test_loads_of_the_wrong_shape_are_named(nets):
    solver = ACOPF(nets["ieee14"])
    with pytest.raises(InputError, match=r"pd_mw: expected shape \(11,\).*got shape \(10,\)"):
        solver.solve(np.ones(10), None)
    with pytest.raises(InputError, match=r"qd_mvar: expected shape \(11,\).*got shape \(2, 11\)"):
        solver.solve(None, np.ones((2, 11)))
    with pytest.raises(InputError, match=r"pd_mw: expected finite numbers, got nan for load id 3"):
        solver.solve(np.where(np.arange(11) == 2, np.nan, 1.0))
    with pytest.raises(InputError, match=r"dir_pd_mw: expected shape \(11,\)"):
        max_loadability(nets["ieee14"], dir_pd_mw=np.ones(3))
    with pytest.raises(InputError, match=r"pd_mw: expected shape \(11,\)"):
        solve_dcopf(nets["ieee14"], np.ones(12))


def test_network_without_costs_is_refused(nets):
    net = nets["ieee14"]
    nan = np.full(net.n_gen, np.nan)
    bare = net.replace(cost_c2=nan, cost_c1=nan, cost_c0=nan)
    with pytest.raises(InputError, match=r"network 'ieee14': the network has no generator costs"):
        ACOPF(bare)
    with pytest.raises(InputError, match=r"no generator costs"):
        solve_dcopf(bare)
    # maximum loadability does not use costs
    assert max_loadability(bare).converged


def test_bad_start_and_zero_direction_are_refused(nets):
    net = nets["ieee14"]
    with pytest.raises(InputError, match=r"start: expected an OPFResult"):
        ACOPF(net).solve(start="warm")
    other = solve_acopf(nets["ieee30"])
    with pytest.raises(InputError, match=r"start: the start point does not belong to network 'ieee14'"):
        ACOPF(net).solve(start=other)
    with pytest.raises(InputError, match=r"dir_pd_mw: the direction of load increase is zero"):
        max_loadability(net, dir_pd_mw=np.zeros(net.n_load), dir_qd_mvar=np.zeros(net.n_load))


def test_settings_round_trip_and_status_table():
    st = OPFSettings(max_iter=80)
    assert OPFSettings(**st.to_dict()) == st
    assert st.to_dict()["max_iter"] == 80
    assert STATUSES == ("converged", "infeasible", "iteration_limit", "numerical_failure")
    assert set(STATUS_MESSAGES) == set(STATUSES)


def test_iteration_limit_is_reported(nets):
    res = ACOPF(nets["ieee118"], OPFSettings(max_iter=3)).solve()
    assert res.status == "iteration_limit" and res.iterations == 3
    assert isinstance(res, OPFResult) and res.message == STATUS_MESSAGES["iteration_limit"]
    with pytest.raises(FrozenInstanceError, match="cannot assign to field 'status'"):
        res.status = "converged"


def _variants(net):
    """ieee30 with a branch out of service, a generator fixed by equal limits, and binding
    angle-difference limits (the IEEE data has none of these)."""
    ins = net.in_service.copy()
    ins[4] = False
    fixed = np.arange(net.n_gen) == 1
    amax, amin = net.angmax_deg.copy(), net.angmin_deg.copy()
    amax[0], amin[1], amin[2] = 0.5, -0.1, 0.0
    return {"out_of_service": net.replace(in_service=ins),
            "fixed_generator": net.replace(pmin_mw=np.where(fixed, 40.0, net.pmin_mw),
                                           pmax_mw=np.where(fixed, 40.0, net.pmax_mw)),
            "angle_limits": net.replace(angmax_deg=amax, angmin_deg=amin)}


@pytest.mark.parametrize("variant", ["out_of_service", "fixed_generator", "angle_limits"])
def test_modified_networks_match_pypower(variant, nets):
    from pypower.api import ppoption, rundcopf, runopf
    net = _variants(nets["ieee30"])[variant]
    res, dc = solve_acopf(net), solve_dcopf(net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = runopf(to_ppc(net), ppoption(**PP_OPTIONS))
        ref_dc = rundcopf(to_ppc(net), ppoption(**PP_OPTIONS))
    # reference library: PYPOWER 5.1.21 runopf / rundcopf on the same modified data
    assert res.converged and ref["success"] and dc.converged and ref_dc["success"]
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)
    assert dc.objective == pytest.approx(ref_dc["f"], rel=1e-6)
    if variant == "fixed_generator":
        assert res.pg_mw[1] == pytest.approx(40.0, abs=1e-9)
        assert {"gen:2:pmin", "gen:2:pmax"} <= set(res.binding)
    if variant == "angle_limits":
        assert "branch:1:angmax" in res.binding and "branch:1:angmax" in dc.binding
        # PYPOWER's MU_ANGMAX column (branch column 20) for branch 1, in $/h per degree
        assert res.multipliers["angmax"][0] == pytest.approx(ref["branch"][0, 20], rel=1e-2)
        assert res.va_deg[0] - res.va_deg[1] == pytest.approx(0.5, abs=1e-5)


def test_max_loadability_of_an_overloaded_base_is_negative_and_consistent(nets):
    net = nets["ieee14"]
    base = max_loadability(net)
    over = max_loadability(net, net.pd_mw * 3, net.qd_mvar * 3)
    assert over.converged and over.lam < 0
    # the same limiting loading reached two ways: (1 + lam) x base = 3 (1 + lam') x base (hand algebra)
    assert 3 * (1 + over.lam_limit) == pytest.approx(1 + base.lam_limit, rel=1e-6)
    assert over.lam < over.lam_limit  # the back-off moves inwards for a negative lam too
    assert ACOPF(net).solve(over.pd_mw, over.qd_mvar).converged
