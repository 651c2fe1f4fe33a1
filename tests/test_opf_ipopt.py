"""The AC-OPF and maximum loadability against an independent formulation written here with
casadi (its own automatic derivatives) and solved by Ipopt (shipped in the casadi wheel).

The formulation takes its admittances from PYPOWER's ``makeYbus`` (reference library), works
in rectangular current terms (``I = Y V``, ``S = V conj(I)``) and shares no code with
flowgauge's solver. :func:`build_casadi_opf` is also used by ``benchmarks/opf.py``.
"""

from __future__ import annotations

import time
import warnings

import numpy as np
import pytest

casadi = pytest.importorskip("casadi")

from flowgauge.network import load_network, to_ppc  # noqa: E402
from flowgauge.opf import ACOPF, max_loadability, solve_acopf  # noqa: E402


def _dm(m):
    import scipy.sparse as sp
    m = sp.csc_matrix(m)
    m.sum_duplicates()
    m.sort_indices()
    return casadi.DM(casadi.Sparsity(m.shape[0], m.shape[1], m.indptr.tolist(), m.indices.tolist()), m.data)


def build_casadi_opf(net, pd_mw=None, qd_mvar=None, loadability=False):
    """The AC-OPF (or, with ``loadability``, max lam with loads (1 + lam) x base) as a casadi NLP.

    Returns a dict with ``nlp`` (x, f, g), bounds ``lbx ubx lbg ubg``, start ``x0`` and the
    sizes; variables ``[va (n_bus) rad, vm (n_bus), pg (n_gen) p.u., qg (n_gen) p.u., (lam)]``.
    """
    import scipy.sparse as sp
    from pypower.makeYbus import makeYbus

    ppc = to_ppc(net, pd_mw, qd_mvar)
    base = ppc["baseMVA"]
    bus, gen, br, gc = (np.array(ppc[k], float) for k in ("bus", "gen", "branch", "gencost"))
    pos = {int(b): i for i, b in enumerate(bus[:, 0])}  # consecutive bus numbers for makeYbus
    bus[:, 0] = np.arange(len(bus))
    gen[:, 0] = [pos[int(b)] for b in gen[:, 0]]
    br[:, 0] = [pos[int(b)] for b in br[:, 0]]
    br[:, 1] = [pos[int(b)] for b in br[:, 1]]
    ybus, yf, yt = makeYbus(base, bus, br)
    nb, ng, nl = len(bus), len(gen), len(br)
    G, B = _dm(ybus.real), _dm(ybus.imag)
    f, t = br[:, 0].astype(int), br[:, 1].astype(int)
    cg = _dm(sp.csr_matrix((np.ones(ng), (gen[:, 0].astype(int), np.arange(ng))), (nb, ng)))
    sx = casadi.SX
    va, vm, pg, qg = sx.sym("va", nb), sx.sym("vm", nb), sx.sym("pg", ng), sx.sym("qg", ng)
    lam = sx.sym("lam") if loadability else 0.0
    vr, vi = vm * casadi.cos(va), vm * casadi.sin(va)
    ir, ii = casadi.mtimes(G, vr) - casadi.mtimes(B, vi), casadi.mtimes(B, vr) + casadi.mtimes(G, vi)
    pbal = vr * ir + vi * ii - casadi.mtimes(cg, pg) + (1 + lam) * bus[:, 2] / base
    qbal = vi * ir - vr * ii - casadi.mtimes(cg, qg) + (1 + lam) * bus[:, 3] / base

    def flow_sq(y, ends):
        c = _dm(sp.csr_matrix((np.ones(nl), (np.arange(nl), ends)), (nl, nb)))
        gy, by = _dm(y.real), _dm(y.imag)
        jr, ji = casadi.mtimes(gy, vr) - casadi.mtimes(by, vi), casadi.mtimes(by, vr) + casadi.mtimes(gy, vi)
        er, ei = casadi.mtimes(c, vr), casadi.mtimes(c, vi)
        return (er * jr + ei * ji) ** 2 + (ei * jr - er * ji) ** 2

    rate = br[:, 5] / base
    lim = np.flatnonzero(rate > 0).tolist()
    s_from, s_to = flow_sq(yf, f)[lim], flow_sq(yt, t)[lim]
    # angle-difference limits of in-service branches; -360 / 360 degrees: none (network format)
    on = br[:, 10] > 0
    ang = np.flatnonzero(on & ((br[:, 11] > -360) | (br[:, 12] < 360)))
    amin = np.where(br[ang, 11] > -360, np.deg2rad(br[ang, 11]), -np.inf)
    amax = np.where(br[ang, 12] < 360, np.deg2rad(br[ang, 12]), np.inf)
    dva = va[f[ang].tolist()] - va[t[ang].tolist()] if ang.size else sx(0, 1)
    p_mw = pg * base
    cost = casadi.sum1(gc[:, 4] * p_mw**2 + gc[:, 5] * p_mw + gc[:, 6])
    ref = np.flatnonzero(bus[:, 1] == 3)
    lbx = np.r_[np.full(nb, -np.inf), bus[:, 12], gen[:, 9] / base, gen[:, 4] / base]
    ubx = np.r_[np.full(nb, np.inf), bus[:, 11], gen[:, 8] / base, gen[:, 3] / base]
    lbx[ref] = ubx[ref] = np.deg2rad(bus[ref, 8])
    x0 = np.r_[np.full(nb, np.deg2rad(bus[ref[0], 8])), (bus[:, 11] + bus[:, 12]) / 2,
               (gen[:, 8] + gen[:, 9]) / 2 / base, (gen[:, 3] + gen[:, 4]) / 2 / base]
    x = casadi.vertcat(va, vm, pg, qg)
    if loadability:
        x, cost = casadi.vertcat(x, lam), -lam
        lbx, ubx, x0 = np.r_[lbx, -np.inf], np.r_[ubx, np.inf], np.r_[x0, 0.0]
    return {"nlp": {"x": x, "f": cost, "g": casadi.vertcat(pbal, qbal, s_from, s_to, dva)},
            "lbx": lbx, "ubx": ubx, "x0": x0, "lim": np.array(lim, int), "rate": rate, "ang": ang,
            "lbg": np.r_[np.zeros(2 * nb), np.full(2 * len(lim), -np.inf), amin],
            "ubg": np.r_[np.zeros(2 * nb), np.tile(rate[lim] ** 2, 2), amax], "nb": nb, "ng": ng,
            "base": base, "ref": ref}


def ipopt_solve(model, tol=1e-9):
    """Solve a :func:`build_casadi_opf` model with Ipopt; returns (result dict, solve seconds)."""
    solver = casadi.nlpsol("opf", "ipopt", model["nlp"], {
        "ipopt.print_level": 0, "print_time": False, "ipopt.sb": "yes", "ipopt.tol": tol,
        "ipopt.max_iter": 3000})
    t0 = time.perf_counter()
    sol = solver(x0=model["x0"], lbx=model["lbx"], ubx=model["ubx"], lbg=model["lbg"], ubg=model["ubg"])
    seconds = time.perf_counter() - t0
    stats = solver.stats()
    x = np.asarray(sol["x"]).ravel()
    nb = model["nb"]
    return {"success": bool(stats["success"]), "status": stats["return_status"], "f": float(sol["f"]),
            "x": x, "vm_pu": x[nb:2 * nb], "va_deg": np.rad2deg(x[:nb]),
            "iterations": int(stats["iter_count"])}, seconds


# the -limits variants carry angle-difference limits that bind (ieee30-limits, ieee300-limits)
CASES = ["ieee14", "ieee30", "ieee57", "ieee118", "ieee300", "demo", "ieee30-limits", "ieee300-limits"]


@pytest.fixture(scope="module")
def ipopt_results():
    out = {}
    for name in CASES:
        net = load_network(name)
        model = build_casadi_opf(net)
        out[name] = (net, model, ipopt_solve(model)[0])
    return out


@pytest.mark.parametrize("name", CASES)
def test_objective_and_voltages_match_ipopt(name, ipopt_results):
    net, _, ref = ipopt_results[name]
    res = solve_acopf(net)
    # reference: Ipopt (casadi wheel) on the independent formulation above
    assert ref["success"] and res.converged
    assert res.objective == pytest.approx(ref["f"], rel=1e-6)
    np.testing.assert_allclose(res.vm_pu, ref["vm_pu"], atol=1e-4)


@pytest.mark.parametrize("name", CASES)
def test_lagrangian_gradient_vanishes_at_our_solution(name, ipopt_results):
    net, model, _ = ipopt_results[name]
    res = solve_acopf(net)
    nb, ng, base, lim = model["nb"], model["ng"], model["base"], model["lim"]
    x = np.r_[np.deg2rad(res.va_deg), res.vm_pu, res.pg_mw / base, res.qg_mvar / base]
    nlp = model["nlp"]
    jac_f = casadi.Function("jf", [nlp["x"]], [casadi.gradient(nlp["f"], nlp["x"])])
    jac_g = casadi.Function("jg", [nlp["x"]], [casadi.jacobian(nlp["g"], nlp["x"]), nlp["g"]])
    df = np.asarray(jac_f(x)).ravel()
    jg, gval = (np.asarray(v) for v in jac_g(x))
    s_from = np.sqrt(np.maximum(gval.ravel()[2 * nb:2 * nb + lim.size], 1e-12))
    s_to = np.sqrt(np.maximum(gval.ravel()[2 * nb + lim.size:2 * nb + 2 * lim.size], 1e-12))
    m = res.multipliers
    # our multipliers converted to casadi's constraint forms: balance rows per p.u. ($/h),
    # squared flow rows: mu_sq = mu_MVA * base / (2 |S|) (d|S|^2 = 2|S| d|S|)
    # angle rows in rad: mu_rad = mu_deg * 180 / pi
    ang = model["ang"]
    y = np.r_[res.lmp_per_mwh * base, res.lmq_per_mvarh * base,
              m["rate_from"][lim] * base / (2 * s_from), m["rate_to"][lim] * base / (2 * s_to),
              (m["angmax"][ang] - m["angmin"][ang]) * 180 / np.pi]
    bound = np.r_[np.zeros(nb), m["vmax"] - m["vmin"], (m["pmax"] - m["pmin"]) * base,
                  (m["qmax"] - m["qmin"]) * base]
    grad = df + jg.T @ y + bound
    grad[model["ref"]] = 0.0  # the reference angle is fixed
    scale = max(np.abs(df).max(), np.abs(y).max())
    # KKT stationarity (Nocedal & Wright, Numerical Optimization, thm 12.1)
    assert np.abs(grad).max() <= 1e-5 * scale
    # primal feasibility on casadi's own constraint functions
    assert np.abs(gval.ravel()[:2 * nb]).max() <= 1e-6
    assert np.all(gval.ravel()[2 * nb:] <= model["ubg"][2 * nb:] + 1e-6)
    assert np.all(gval.ravel()[2 * nb:] >= model["lbg"][2 * nb:] - 1e-6)


@pytest.mark.parametrize("name", ["ieee14", "ieee30", "demo"])
def test_max_loadability_matches_ipopt(name):
    net = load_network(name)
    ref, _ = ipopt_solve(build_casadi_opf(net, loadability=True))
    lr = max_loadability(net)
    # reference: Ipopt maximising lam on the independent formulation (local optima agree here)
    assert ref["success"] and lr.converged
    assert lr.lam == pytest.approx(-ref["f"], rel=1e-5)


@pytest.mark.parametrize("name,factor", [("ieee30", 1.1), ("ieee57", 1.1)])
def test_ipopt_also_finds_no_solution_where_we_report_infeasible(name, factor):
    net = load_network(name)
    pd, qd = net.pd_mw * factor, net.qd_mvar * factor
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref, _ = ipopt_solve(build_casadi_opf(net, pd, qd))
    # reference: Ipopt's own infeasibility detection on the same loading
    assert ref["status"] == "Infeasible_Problem_Detected"
    assert ACOPF(net).solve(pd, qd).status in ("infeasible", "iteration_limit")
