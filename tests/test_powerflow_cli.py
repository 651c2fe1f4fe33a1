"""``flowgauge powerflow``: output checked against PYPOWER runpf; bad input gives one line and exit 2."""

from __future__ import annotations

import json

import numpy as np
from pypower.idx_brch import PF, QT
from pypower.idx_bus import VA, VM
from pypower.idx_gen import QG

from flowgauge.cli import main
from flowgauge.network import load_network, write_network_json

from test_powerflow_support import pypower_ac


def test_json_output_matches_pypower(capsys):
    rc = main(["powerflow", "ieee30", "--json"])
    out = capsys.readouterr().out
    assert rc == 0
    doc = json.loads(out)
    net = load_network("ieee30")
    res = pypower_ac(net)  # source: PYPOWER runpf on the same case data
    assert doc["converged"] is True and doc["iterations"] == 3
    assert [b["id"] for b in doc["buses"]] == net.bus_id.tolist()
    np.testing.assert_allclose([b["vm_pu"] for b in doc["buses"]], res["bus"][:, VM], atol=1e-6)
    np.testing.assert_allclose([b["va_deg"] for b in doc["buses"]], res["bus"][:, VA], atol=1e-5)
    np.testing.assert_allclose([b["pf_mw"] for b in doc["branches"]], res["branch"][:, PF], atol=1e-4)
    np.testing.assert_allclose([b["qt_mvar"] for b in doc["branches"]], res["branch"][:, QT], atol=1e-4)
    np.testing.assert_allclose([g["qg_mvar"] for g in doc["generators"]], res["gen"][:, QG], atol=1e-4)
    assert sorted(doc["branches"][0]) == ["id", "pf_mw", "pt_mw", "qf_mvar", "qt_mvar"]


def test_table_output(capsys):
    rc = main(["powerflow", "ieee14"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "converged in 4 iterations" in out
    # total load of the IEEE 14-bus system: 259.0 MW, 73.5 MVAr (published case data, from memory)
    assert "259.00" in out and "73.50" in out
    # solved branch losses of the IEEE 14-bus system: 13.393 MW (published solution, from memory)
    assert "13.39" in out


def test_unknown_network_exit_2(capsys):
    rc = main(["powerflow", "ieee99"])
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith("Error: ieee99: not a bundled network and no such file")
    assert len(err.strip().splitlines()) == 1


def test_malformed_file_exit_2(tmp_path, capsys):
    bad = tmp_path / "broken.json"
    bad.write_text("{not json")
    rc = main(["powerflow", str(bad)])
    err = capsys.readouterr().err
    assert rc == 2
    assert str(bad) in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_non_convergence_exit_2(tmp_path, capsys):
    net = load_network("ieee30")
    heavy = net.with_loads(10 * net.pd_mw, 10 * net.qd_mvar)  # far beyond what the network can carry
    path = tmp_path / "heavy.json"
    write_network_json(heavy, path)
    rc = main(["powerflow", str(path), "--json"])
    cap = capsys.readouterr()
    assert rc == 2
    assert cap.out == ""
    assert cap.err.startswith(f"Error: {path}: the power flow did not converge: ")
    assert len(cap.err.strip().splitlines()) == 1


def test_malformed_cdf_file_exit_2(tmp_path, capsys):
    bad = tmp_path / "broken.cdf"
    bad.write_text("this is not a load-flow data file\n")
    rc = main(["powerflow", str(bad)])
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith(f"Error: {bad}") and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
