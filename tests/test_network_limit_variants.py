"""The limit variants (<name>-limits): they load, they differ from their originals only in the
branch limits and the provenance, their AC-OPF at the base loading matches PYPOWER runopf with a
thermal or angle limit binding, and tools/make_limit_variants.py rebuilds them byte for byte."""

import hashlib
import importlib.util
import json
import warnings
from pathlib import Path

import numpy as np
import pytest

from flowgauge.network import bundled_names, load_network, network_to_dict, to_ppc
from flowgauge.network._checks import check_network
from flowgauge.opf import ACOPF, OPFSettings

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "src" / "flowgauge" / "network" / "data"
TOOL = ROOT / "tools" / "make_limit_variants.py"
ORIGINALS = ["ieee14", "ieee30", "ieee57", "ieee118", "ieee300"]
LIMIT_FIELDS = ("rate_mva", "angmin_deg", "angmax_deg")
# Loading factor (x base) at which the binding check runs. ieee14's base case sits at about half
# of what the network can carry (capacity x1.95 in its provenance); scaled uniformly, its branch
# limits first bind at about 1.7x. The other bases sit near their capacity.
BINDING_FACTOR = {"ieee14": 1.8}


@pytest.fixture(scope="module")
def pypower():
    from pypower.api import ppoption, runopf
    return runopf, ppoption(VERBOSE=0, OUT_ALL=0)


def _tool():
    spec = importlib.util.spec_from_file_location("make_limit_variants", TOOL)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.mark.parametrize("name", ORIGINALS)
def test_variant_is_bundled_and_passes_the_load_time_checks(name):
    assert f"{name}-limits" in bundled_names()
    var = load_network(f"{name}-limits")
    check_network(var, source=var.name)
    assert var.name == f"{name}-limits"
    on = var.in_service
    # common practice: every branch in service carries a thermal rating
    assert np.all(np.isfinite(var.rate_mva[on])) and np.all(var.rate_mva[on] > 0)
    # common practice: angle-difference limits of at most +-30 degrees, here symmetric
    assert np.all(var.angmax_deg[on] > 0) and np.all(var.angmax_deg[on] <= 30.0)
    np.testing.assert_array_equal(var.angmin_deg[on], -var.angmax_deg[on])


@pytest.mark.parametrize("name", ORIGINALS)
def test_variant_equals_its_original_except_the_limits(name):
    # reference: the original's bundled file, read as plain JSON
    orig = json.loads((DATA / f"{name}.json").read_text())
    var = json.loads((DATA / f"{name}-limits.json").read_text())
    for doc in (orig, var):
        doc.pop("name"), doc.pop("provenance")
        for row in doc["branches"]:
            for key in LIMIT_FIELDS:
                row.pop(key)
    assert var == orig
    # the limits do differ: the originals carry no angle limits (-360/360, published data)
    orig_br = json.loads((DATA / f"{name}.json").read_text())["branches"]
    assert all(row["angmax_deg"] == 360 for row in orig_br)


@pytest.mark.parametrize("name", ORIGINALS)
def test_provenance_names_the_current_original(name):
    var = load_network(f"{name}-limits")
    prov = var.provenance
    assert prov["derived_from"] == name
    assert prov["derived_by"] == "tools/make_limit_variants.py"
    assert set(prov["method"]) >= {"seed", "reference_samples", "rate_percentile", "angle_percentile"}
    # hand-computable: SHA-256 of the original's compact canonical JSON (sorted keys, no spaces;
    # numbers as the canonical file stores them), here with hashlib and the standard json module
    doc = json.loads((DATA / f"{name}.json").read_text())
    compact = json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                         allow_nan=False).encode()
    assert prov["derived_from_content_hash"] == hashlib.sha256(compact).hexdigest()


def _pypower_branch_binding(net, ref) -> set[str]:
    # reference library: PYPOWER's branch multipliers MU_SF, MU_ST, MU_ANGMIN, MU_ANGMAX
    # (columns 17-20); a limit binds when its multiplier is positive (above 1e-2 of the largest,
    # the tolerance of the multiplier comparison in tests/test_opf.py)
    br = ref["branch"]
    mu = {"rate_from": br[:, 17], "rate_to": br[:, 18], "angmin": br[:, 19], "angmax": br[:, 20]}
    top = max(1.0, max(m.max() for m in mu.values()))
    return {f"branch:{int(net.branch_id[i])}:{lim}"
            for lim, m in mu.items() for i in np.flatnonzero(m > 1e-2 * top)}


def _ipopt_branch_binding(net, pd_mw, qd_mvar):
    """Objective [$/h] and the branch limits active at Ipopt's optimum (slack below 1e-6: flow
    as a fraction of the rating, angle in rad), from the independent casadi formulation of
    tests/test_opf_ipopt.py with the angle-difference limits added here."""
    casadi = pytest.importorskip("casadi")
    from test_opf_ipopt import build_casadi_opf, ipopt_solve

    model = build_casadi_opf(net, pd_mw, qd_mvar)
    nb = model["nb"]
    f, t = net.f_idx, net.t_idx
    va = model["nlp"]["x"][:nb]
    dang = casadi.vertcat(*[va[int(i)] - va[int(j)] for i, j in zip(f, t)])
    model["nlp"]["g"] = casadi.vertcat(model["nlp"]["g"], dang)
    model["lbg"] = np.r_[model["lbg"], np.deg2rad(net.angmin_deg)]
    model["ubg"] = np.r_[model["ubg"], np.deg2rad(net.angmax_deg)]
    out, _ = ipopt_solve(model)
    assert out["success"], out["status"]
    lim, rate = model["lim"], model["rate"]
    x = out["x"]
    va_x = x[:nb]
    g = np.asarray(casadi.Function("g", [model["nlp"]["x"]], [model["nlp"]["g"]])(x)).ravel()
    n_lim = len(lim)
    s_from, s_to = np.sqrt(g[2 * nb:2 * nb + n_lim]), np.sqrt(g[2 * nb + n_lim:2 * nb + 2 * n_lim])
    active = set()
    for end, s_end in (("rate_from", s_from), ("rate_to", s_to)):
        for k in np.flatnonzero(1.0 - s_end / rate[lim] < 1e-6):
            active.add(f"branch:{int(net.branch_id[lim[k]])}:{end}")
    d = va_x[f] - va_x[t]
    for name, hit in (("angmin", d - np.deg2rad(net.angmin_deg) < 1e-6),
                      ("angmax", np.deg2rad(net.angmax_deg) - d < 1e-6)):
        active |= {f"branch:{int(net.branch_id[k])}:{name}" for k in np.flatnonzero(hit)}
    return out["f"], active


@pytest.mark.parametrize("name", ORIGINALS)
def test_acopf_at_base_matches_a_reference_with_a_branch_limit_binding(name, pypower):
    runopf, opts = pypower
    var = load_network(f"{name}-limits")
    solver = ACOPF(var, OPFSettings())
    k = BINDING_FACTOR.get(name, 1.0)
    loadings = [(var.pd_mw, var.qd_mvar)] + ([(var.pd_mw * k, var.qd_mvar * k)] if k != 1.0 else [])
    for pd, qd in loadings:
        res = solver.solve(pd, qd)
        assert res.status == "converged"
        if name == "ieee300":
            # PYPOWER 5.1.21 runopf stops on a numerical failure on this variant; the reference
            # is Ipopt (casadi) on an independent formulation of the same data
            ref_f, ref_binding = _ipopt_branch_binding(var, pd, qd)
        else:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                ref = runopf(to_ppc(var, pd, qd), opts)
            # reference library: PYPOWER 5.1.21 runopf on the same data (flowgauge.network.to_ppc)
            assert ref["success"]
            ref_f, ref_binding = ref["f"], _pypower_branch_binding(var, ref)
        assert res.objective == pytest.approx(ref_f, rel=1e-6)
    assert ref_binding, "the reference finds no thermal or angle limit binding"
    assert ref_binding <= set(res.binding)


def test_tool_rebuilds_ieee14_byte_for_byte_and_leaves_the_originals(tmp_path):
    before = {n: (DATA / f"{n}.json").read_bytes() for n in ORIGINALS}
    assert _tool().main(["--networks", "ieee14", "--out", str(tmp_path)]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ieee14-limits.json"]
    # reference: the committed file, written by the same tool with the recorded seed
    assert (tmp_path / "ieee14-limits.json").read_bytes() == (DATA / "ieee14-limits.json").read_bytes()
    assert {n: (DATA / f"{n}.json").read_bytes() for n in ORIGINALS} == before


def test_tool_refuses_an_unknown_network(capsys):
    assert _tool().main(["--networks", "ieee15"]) == 2
    assert "Error: --networks: unknown network 'ieee15'" in capsys.readouterr().err
