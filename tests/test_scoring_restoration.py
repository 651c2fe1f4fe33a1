"""The restoration power flow and its limit checks: a 3-bus case worked out by hand, and
agreement with PYPOWER's runpf from the same setpoints on ieee118."""

from dataclasses import replace

import numpy as np
import pytest

from flowgauge.network import Network, load_network, to_ppc
from flowgauge.scoring import (REACTIVE_LIMITS_PROFILE, STRICT_PROFILE, CAUSES, bound_violation, generator_cost_per_h,
                               optimality_gap_pct, restore)


def three_bus() -> Network:
    """Hand case. Bus 1 reference (generator 1: 0-100 MW, 10 $/MWh), bus 2 PV (generator 2:
    0-200 MW, 20 $/MWh), bus 3 a 150 MW unity power factor load. Three lossless lines (r = 0,
    b = 0, x = 0.1 p.u. on 100 MVA), 1-3 rated 60 MVA, the others unrated. Voltage limits
    0.95-1.05 p.u. at buses 1-2 and 0.9-1.1 at bus 3; reactive limits +-300 MVAr."""
    f = lambda *v: np.array(v, float)  # noqa: E731
    i = lambda *v: np.array(v, np.int64)  # noqa: E731
    return Network(
        name="three-bus", base_mva=100.0,
        bus_id=i(1, 2, 3), bus_type=i(3, 2, 1), vmin_pu=f(0.95, 0.95, 0.9), vmax_pu=f(1.05, 1.05, 1.1),
        base_kv=f(230, 230, 230), gs_mw=f(0, 0, 0), bs_mvar=f(0, 0, 0), vm_pu=f(1, 1, 1), va_deg=f(0, 0, 0),
        load_id=i(1), load_bus=i(3), pd_mw=f(150), qd_mvar=f(0),
        gen_id=i(1, 2), gen_bus=i(1, 2), pmin_mw=f(0, 0), pmax_mw=f(100, 200), qmin_mvar=f(-300, -300),
        qmax_mvar=f(300, 300), vg_pu=f(1, 1), pg_mw=f(100, 50), qg_mvar=f(0, 0),
        cost_c2=f(0, 0), cost_c1=f(10, 20), cost_c0=f(0, 0),
        branch_id=i(1, 2, 3), from_bus=i(1, 1, 2), to_bus=i(2, 3, 3), r_pu=f(0, 0, 0), x_pu=f(0.1, 0.1, 0.1),
        b_pu=f(0, 0, 0), rate_mva=f(np.nan, 60, np.nan), tap=f(1, 1, 1), shift_deg=f(0, 0, 0),
        angmin_deg=f(-360, -360, -360), angmax_deg=f(360, 360, 360), in_service=np.ones(3, bool))


def test_three_bus_case_worked_by_hand():
    net = three_bus()
    # Three predictions (hand-made):
    #   S0: load 150 MW, pg = [120, 30] MW, vm = [1, 1, 1]
    #   S1: load 5000 MW, pg = [100, 200] MW, vm = [1, 1, 1]
    #   S2: load 150 MW, pg = [100, 50] MW, vm = [1, 1.08, 1]
    pd = np.array([[150.0], [5000.0], [150.0]])
    pg = np.array([[120.0, 30.0], [100.0, 200.0], [100.0, 50.0]])
    vm = np.array([[1.0, 1.0, 1.0], [1.0, 1.0, 1.0], [1.0, 1.08, 1.0]])
    # Reference optimum for 150 MW (hand: lossless, merit order): generator 1 at its 100 MW limit,
    # generator 2 the remaining 50 MW -> C* = 100*10 + 50*20 = 2000 $/h.
    c_star = np.array([2000.0, 2000.0])

    # Raw metrics. S0: cost 120*10 + 30*20 = 1800 $/h -> gap 100*(1800-2000)/2000 = -10 %;
    # generator 1 is 20 MW above its 100 MW limit. S2: cost 2000 -> gap 0; bus 2 at 1.08 p.u. is
    # 0.03 p.u. above its 1.05 limit.
    raw = generator_cost_per_h(pg[[0, 2]], cost_c2=net.cost_c2, cost_c1=net.cost_c1, cost_c0=net.cost_c0)
    np.testing.assert_allclose(optimality_gap_pct(raw, c_star), [-10.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(bound_violation(pg[[0, 2]], net.pmin_mw, net.pmax_mw), [20.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(bound_violation(vm[[0, 2]], net.vmin_pu, net.vmax_pu), [0.0, 0.03], atol=1e-12)

    r = restore(net, pd_mw=pd, qd_mvar=np.zeros((3, 1)), pg_mw=pg, vm_pu=vm, profile=STRICT_PROFILE)
    # S1 diverges (hand): with bus 3 fed by two lines of 0.1 p.u. from sources at 1.0 p.u., each
    # line carries at most V_i V_3 / x <= 10 p.u., and V_3 <= 1 with no reactive source at bus 3,
    # so at most 2000 MW can reach the 5000 MW load: no power flow solution exists.
    assert r.converged.tolist() == [True, False, True]
    assert {c for c in CAUSES if r.causes[c][1]} == {"diverged"}
    assert np.isnan(r.cost_per_h[1]) and np.isnan(r.violations["restored_voltage_pu"][1])
    # Lossless lines (r = 0): the reference generator supplies load minus the other generators,
    # 150 - 30 = 120 MW in S0 and 150 - 50 = 100 MW in S2 (to the 1e-8 p.u. power-flow tolerance).
    np.testing.assert_allclose(r.pg_mw[[0, 2]], [[120.0, 30.0], [100.0, 50.0]], atol=1e-5)
    # Restored cost 1800 and 2000 $/h -> restored gap -10 % and 0 %.
    np.testing.assert_allclose(optimality_gap_pct(r.cost_per_h[[0, 2]], c_star), [-10.0, 0.0], atol=1e-6)
    # S0 fails on active power (generator 1 restored at 120 MW, 20 MW over) and on the thermal limit
    # of line 1-3: by hand with DC flows on the equal-reactance triangle, 2/3 of generator 1's 120 MW
    # and 1/3 of generator 2's 30 MW flow on 1-3: 80 + 10 = 90 MW on a 60 MVA rating, 50 % over.
    assert {c for c in CAUSES if r.causes[c][0]} == {"active_power", "thermal"}
    assert r.violations["restored_active_power_mw"][0] == pytest.approx(20.0, abs=1e-5)
    assert r.violations["restored_thermal_pct"][0] == pytest.approx(50.0, abs=2.0)
    # Bus 3 voltage, by hand with lines 1-3 and 2-3 in parallel (0.05 p.u.) from 1.0 p.u. and a
    # unity power factor load of 1.5 p.u.: V^2 = (1 + sqrt(1 - 4 (1.5*0.05)^2)) / 2 -> V = 0.9972.
    assert r.vm_pu[0, 2] == pytest.approx(0.9972, abs=0.002)
    # S2 keeps the 1.08 p.u. setpoint (no clipping): voltage cause, 0.03 p.u. over; line 1-3 carries
    # at least the DC estimate 2/3*100 + 1/3*50 = 83.3 MW on 60 MVA (39 % over): thermal cause.
    assert {c for c in CAUSES if r.causes[c][2]} == {"voltage", "thermal"}
    assert r.violations["restored_voltage_pu"][2] == pytest.approx(0.03, abs=1e-9)
    assert r.violations["restored_thermal_pct"][2] > 39.0
    assert r.failed.tolist() == [True, True, True]


def test_three_bus_generator_at_its_reactive_limit_worked_by_hand():
    # The hand case above with generator 2 allowed at most 20 MVAr, no active power anywhere
    # (pg = [0, 0], no MW load) and a 60 MVAr load at bus 3; setpoints 1.0 p.u. at buses 1 and 2.
    net = replace(three_bus(), qmax_mvar=np.array([300.0, 20.0]))
    pd, qd = np.zeros((1, 1)), np.array([[60.0]])
    pg, vm = np.zeros((1, 2)), np.ones((1, 3))
    # With no active injection anywhere the angles stay 0 (flat angles satisfy the active-power
    # equations) and a lossless line of x = 0.1 p.u. carries V_i (V_i - V_j) / x from bus i.
    # Before switching (bus 2 PV at 1.0): bus 3 is fed by two equal lines from 1.0 p.u.:
    #   V3 (V3 - 1) / 0.05 = -0.6 -> V3^2 - V3 + 0.03 = 0 -> V3 = (1 + sqrt(0.88)) / 2 = 0.969042,
    # and generator 2 sends 10 (1 - V3) = 0.30958 p.u. = 30.96 MVAr > 20: held at 20 MVAr, bus 2
    # becomes PQ. After switching (bus 2 injects 0.2 p.u., bus 3 -0.6 p.u.):
    #   10 V2 (2 V2 - 1 - V3) = 0.2   ->  2 V2^2 - V2 - V2 V3 = a = 0.02
    #   10 V3 (2 V3 - 1 - V2) = -0.6  ->  2 V3^2 - V3 - V2 V3 = b = -0.06
    # With s = V2 + V3 and d = V2 - V3, their difference is d (2s - 1) = a - b = 0.08 and their
    # sum 2 (V2^2 + V3^2) - 2 V2 V3 - s = 1.5 d^2 + s^2 / 2 - s = a + b = -0.04, so
    #   s = 1 + sqrt(1 - 2 (0.04 + 1.5 d^2)),   d = 0.08 / (2s - 1).
    # From d = 0: s = 1.959166 -> d = 0.027413 -> s = 1.957990 -> d = 0.027435 -> s = 1.957988
    # (settled to 1e-7), so V2 = (s + d) / 2 = 0.992712 and V3 = (s - d) / 2 = 0.965277.
    # Bus 2 sits below its 1.0 setpoint, the side that keeps generator 2 at its maximum: settled.
    # The reference generator sends 10 (1 - V2) + 10 (1 - V3) = 0.42012 p.u. = 42.01 MVAr.
    r = restore(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, vm_pu=vm, profile=REACTIVE_LIMITS_PROFILE)
    assert r.converged.tolist() == [True] and r.switched_generators.tolist() == [1]
    np.testing.assert_allclose(r.vm_pu[0], [1.0, 0.992712, 0.965277], atol=2e-6)
    np.testing.assert_allclose(r.qg_mvar[0], [42.0115, 20.0], atol=1e-3)
    np.testing.assert_allclose(r.va_deg[0], [0.0, 0.0, 0.0], atol=1e-9)
    # Every restored limit holds (voltages 0.95-1.05 and 0.9-1.1, line 1-3 carries 10 (1 - V3) =
    # 34.7 MVAr on its 60 MVA rating): the sample passes.
    assert not r.failed[0]
    # The strict profile keeps bus 2 at its setpoint: generator 2 at 30.96 MVAr, 10.96 over.
    s = restore(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, vm_pu=vm, profile=STRICT_PROFILE)
    assert {c for c in CAUSES if s.causes[c][0]} == {"reactive"}
    assert s.violations["restored_reactive_power_mvar"][0] == pytest.approx(10.958424, abs=1e-5)


def test_restoration_matches_pypower_runpf_on_ieee118(rng):
    # Reference: PYPOWER 5.1 runpf (Newton, reactive limits not enforced) from the same setpoints.
    from pypower.api import ppoption, runpf

    net = load_network("ieee118")
    s = 20
    scale = rng.uniform(0.9, 1.1, (s, net.n_load))
    pd, qd = net.pd_mw * scale, net.qd_mvar * scale
    pg = net.pg_mw * rng.uniform(0.95, 1.05, (s, net.n_gen))
    vm = np.ones((s, net.n_bus))
    vg = net.vg_pu + rng.uniform(-0.01, 0.01, (s, net.n_gen))
    vm[:, net.gen_bus_idx] = vg  # every generator of a bus shares the bus's setpoint in ieee118
    vg = vm[:, net.gen_bus_idx]
    r = restore(net, pd_mw=pd, qd_mvar=qd, pg_mw=pg, vm_pu=vm, profile=STRICT_PROFILE)
    assert r.converged.all()
    opt = ppoption(VERBOSE=0, OUT_ALL=0, PF_TOL=1e-10, ENFORCE_Q_LIMS=0)
    for k in range(s):
        ppc = to_ppc(net, pd[k], qd[k])
        ppc["gen"][:, 1] = pg[k]
        ppc["gen"][:, 5] = vg[k]
        res = runpf(ppc, opt)[0]
        assert res["success"]
        np.testing.assert_allclose(r.vm_pu[k], res["bus"][:, 7], atol=1e-6)
        np.testing.assert_allclose(r.va_deg[k], res["bus"][:, 8], atol=1e-5)
        np.testing.assert_allclose(r.pg_mw[k], res["gen"][:, 1], atol=1e-4)
