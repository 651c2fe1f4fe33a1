"""Per-sample metric functions: common properties over the registry, hand-worked values, and
branch flows / balance residuals against PYPOWER's runpf."""

import numpy as np
import pytest

from flowgauge.errors import InputError
from flowgauge.network import load_network
from flowgauge.scoring import (METRICS, angle_difference_violation_deg, balance_residuals, bound_violation,
                               branch_flows_mva, generator_cost_per_h, optimality_gap_pct, thermal_overload_mva,
                               thermal_overload_pct)

NET = load_network("ieee14")
RATE = np.where(np.arange(20) % 3 == 0, np.nan, 120.0)  # some branches unrated


def _state(rng, s=6):
    """Random stacked inputs around the ieee14 published operating point."""
    return {
        "pd_mw": NET.pd_mw * rng.uniform(0.9, 1.1, (s, NET.n_load)),
        "qd_mvar": NET.qd_mvar * rng.uniform(0.9, 1.1, (s, NET.n_load)),
        "pg_mw": NET.pg_mw * rng.uniform(0.9, 1.1, (s, NET.n_gen)),
        "qg_mvar": NET.qg_mvar * rng.uniform(0.9, 1.1, (s, NET.n_gen)),
        "vm_pu": NET.vm_pu * rng.uniform(0.97, 1.03, (s, NET.n_bus)),
        "va_deg": NET.va_deg + rng.normal(0, 2, (s, NET.n_bus)),
        "sf_mva": rng.uniform(50, 150, (s, NET.n_branch)),
        "st_mva": rng.uniform(50, 150, (s, NET.n_branch)),
    }


FULL_STATE = ["pd_mw", "qd_mvar", "pg_mw", "qg_mvar", "vm_pu", "va_deg"]

def _full(metric, st):
    return metric.func(NET, **{k: st[k] for k in FULL_STATE})


# metric name -> (callable taking the stacked state, names of the stacked inputs it reads)
CASES = {
    "generator_cost_per_h": (lambda st: generator_cost_per_h(st["pg_mw"], cost_c2=NET.cost_c2,
                             cost_c1=NET.cost_c1, cost_c0=NET.cost_c0), ["pg_mw"]),
    "optimality_gap_pct": (lambda st: optimality_gap_pct(st["pg_mw"].sum(1), st["pd_mw"].sum(1)), ["pg_mw", "pd_mw"]),
    "bound_violation": (lambda st: bound_violation(st["vm_pu"], NET.vmin_pu, NET.vmax_pu), ["vm_pu"]),
    "active_balance_residual_mw": (lambda st: _full(METRICS["active_balance_residual_mw"], st), FULL_STATE),
    "reactive_balance_residual_mvar": (lambda st: _full(METRICS["reactive_balance_residual_mvar"], st),
                                       FULL_STATE),
    "thermal_overload_mva": (lambda st: thermal_overload_mva(st["sf_mva"], st["st_mva"], rate_mva=RATE,
                                                             in_service=NET.in_service), ["sf_mva", "st_mva"]),
    "thermal_overload_pct": (lambda st: thermal_overload_pct(st["sf_mva"], st["st_mva"], rate_mva=RATE,
                                                             in_service=NET.in_service), ["st_mva", "sf_mva"]),
    "angle_difference_violation_deg": (lambda st: angle_difference_violation_deg(
        st["va_deg"], f_idx=NET.f_idx, t_idx=NET.t_idx, angmin_deg=np.full(20, -5.0), angmax_deg=np.full(20, 5.0),
        in_service=NET.in_service), ["va_deg"]),
}


def test_every_registered_metric_is_classified():
    # guard: a new metric must be added to the common-property cases above
    assert sorted(CASES) == sorted(METRICS)
    assert {name: m.direction for name, m in METRICS.items() if m.direction != "lower is better"} == {
        "optimality_gap_pct": "closer to 0 is better"}


@pytest.mark.parametrize("name", sorted(CASES))
def test_row_order_invariance(name, rng):
    func, _ = CASES[name]
    st = _state(rng)
    perm = rng.permutation(6)
    base = func(st)
    assert base.shape == (6,)
    np.testing.assert_allclose(func({k: v[perm] for k, v in st.items()}), base[perm], rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("name", sorted(CASES))
@pytest.mark.parametrize("bad", [np.nan, np.inf])
def test_non_finite_input_rejected(name, bad, rng):
    func, inputs = CASES[name]
    st = _state(rng)
    st[inputs[0]][3, 0] = bad
    with pytest.raises(InputError, match="non-finite value"):
        func(st)


def test_wrong_shape_names_the_input():
    with pytest.raises(InputError, match=r"expected 5 columns, got shape \(2, 4\)") as exc:
        generator_cost_per_h(np.ones((2, 4)), cost_c2=NET.cost_c2, cost_c1=NET.cost_c1, cost_c0=NET.cost_c0)
    assert exc.value.where == "pg_mw"
    with pytest.raises(InputError, match=r"expected an array of shape \(n_samples, 5\), got shape \(5,\)"):
        generator_cost_per_h(np.ones(5), cost_c2=NET.cost_c2, cost_c1=NET.cost_c1, cost_c0=NET.cost_c0)


def test_cost_and_gap_by_hand():
    # Hand calculation: c2 = [0.01, 0.02], c1 = [10, 20], c0 = [5, 0];
    # pg = [100, 50]: 0.01*100^2 + 10*100 + 5 + 0.02*50^2 + 20*50 = 100 + 1000 + 5 + 50 + 1000 = 2155 $/h.
    cost = generator_cost_per_h([[100.0, 50.0]], cost_c2=[0.01, 0.02], cost_c1=[10, 20], cost_c0=[5, 0])
    assert cost[0] == pytest.approx(2155.0, rel=1e-14)
    # Hand calculation: 100 * (2155 - 2000) / 2000 = 7.75 %; and a negative reference cost uses |C*|.
    np.testing.assert_allclose(optimality_gap_pct([2155.0, -90.0], [2000.0, -100.0]), [7.75, 10.0], rtol=1e-14)
    with pytest.raises(InputError, match="reference cost of 0"):
        optimality_gap_pct([1.0], [0.0])


def test_bound_violation_by_hand():
    # Hand calculation: limits [0.95, 1.05]; 1.07 exceeds by 0.02, 0.92 falls short by 0.03 -> 0.03;
    # a row within its limits gives 0.
    v = bound_violation([[1.07, 0.92, 1.0], [1.0, 1.0, 0.95]], [0.95] * 3, [1.05] * 3)
    np.testing.assert_allclose(v, [0.03, 0.0], atol=1e-15)


def test_thermal_and_angle_by_hand():
    # Hand calculation: ratings 100 and NaN (no limit) MVA; ends 110/90 and 500/500 MVA:
    # overload 10 MVA = 10 % of the rating; the unrated branch does not count.
    sf, st = np.array([[110.0, 500.0]]), np.array([[90.0, 500.0]])
    rate = np.array([100.0, np.nan])
    assert thermal_overload_mva(sf, st, rate_mva=rate, in_service=[True, True])[0] == pytest.approx(10.0)
    assert thermal_overload_pct(sf, st, rate_mva=rate, in_service=[True, True])[0] == pytest.approx(10.0)
    # out of service: no limit applies
    assert thermal_overload_pct(sf, st, rate_mva=rate, in_service=[False, True])[0] == 0.0
    # Hand calculation: angles [0, -32, 5] deg; branch 0->1 difference 32 deg against [-30, 30]: 2 deg over;
    # branch 1->2 difference -37 deg with no limit (-360/360): ignored.
    v = angle_difference_violation_deg(np.array([[0.0, -32.0, 5.0]]), f_idx=np.array([0, 1]), t_idx=np.array([1, 2]),
                                       angmin_deg=np.array([-30.0, -360.0]), angmax_deg=np.array([30.0, 360.0]),
                                       in_service=np.array([True, True]))
    assert v[0] == pytest.approx(2.0)


def _pypower_case14_solution():
    from pypower.api import case14, runpf, ppoption
    r = runpf(case14(), ppoption(VERBOSE=0, OUT_ALL=0, PF_TOL=1e-12))[0]
    assert r["success"]
    return r


def test_branch_flows_match_pypower_runpf():
    # Reference: PYPOWER runpf on case14; its branch PF/QF/PT/QT columns from the solved voltages.
    r = _pypower_case14_solution()
    vm, va = r["bus"][:, 7][None], r["bus"][:, 8][None]
    sf, st = branch_flows_mva(NET, vm_pu=vm, va_deg=va)
    np.testing.assert_allclose(sf[0], np.hypot(r["branch"][:, 13], r["branch"][:, 14]), atol=1e-8)
    np.testing.assert_allclose(st[0], np.hypot(r["branch"][:, 15], r["branch"][:, 16]), atol=1e-8)


def test_balance_residual_zero_at_pypower_solution():
    # Reference: PYPOWER runpf on case14 balances every bus to 1e-12 p.u.; its generator outputs,
    # bus voltages and the case loads must give residuals near 0 MW / MVAr.
    r = _pypower_case14_solution()
    state = dict(pd_mw=NET.pd_mw[None], qd_mvar=NET.qd_mvar[None], pg_mw=r["gen"][:, 1][None],
                 qg_mvar=r["gen"][:, 2][None], vm_pu=r["bus"][:, 7][None], va_deg=r["bus"][:, 8][None])
    mis = balance_residuals(NET, **state)
    assert np.abs(mis).max() < 1e-6
    # Hand calculation: 10 MW more at generator 2 leaves +10 MW at its bus and nowhere else.
    state["pg_mw"] = state["pg_mw"] + np.array([[0.0, 10.0, 0.0, 0.0, 0.0]])
    assert METRICS["active_balance_residual_mw"].func(NET, **state)[0] == pytest.approx(10.0, abs=1e-6)
    assert METRICS["reactive_balance_residual_mvar"].func(NET, **state)[0] < 1e-6
