"""``flowgauge opf``: output against PYPOWER's optima, and one-line errors with exit 2."""

import json

import numpy as np
import pytest

from flowgauge.cli import main
from flowgauge.network import load_network, write_network_json


def test_json_output_of_the_ac_opf(capsys):
    assert main(["opf", "ieee14", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    # published optimum of the 14-bus AC-OPF (from memory), reproduced by PYPOWER 5.1.21 runopf
    assert out["objective"] == pytest.approx(8081.53, rel=1e-5)
    assert out["status"] == "converged" and out["formulation"] == "ac"
    assert out["iterations"] > 0 and out["seconds"] > 0
    assert [g["id"] for g in out["generators"]] == [1, 2, 3, 4, 5]
    assert {"id", "pg_mw", "qg_mvar"} <= set(out["generators"][0])
    assert len(out["buses"]) == 14 and {"id", "vm_pu", "va_deg", "lmp"} <= set(out["buses"][0])
    # PYPOWER runopf: bus 1 price 36.72 $/MWh, generator 1 at 194.33 MW (reference library run)
    assert out["buses"][0]["lmp"] == pytest.approx(36.72, abs=0.01)
    assert out["generators"][0]["pg_mw"] == pytest.approx(194.33, abs=0.05)
    assert "gen:1:qmin" in out["binding"] and len(out["signature"]) == 16


def test_json_output_of_the_dc_opf(capsys):
    assert main(["opf", "ieee14", "--dc", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    # PYPOWER 5.1.21 rundcopf on case14: 7642.5937 $/h (reference library run)
    assert out["objective"] == pytest.approx(7642.5937, rel=1e-6)
    assert out["formulation"] == "dc"
    assert all(g["qg_mvar"] is None for g in out["generators"])
    # lossless, no binding flow limit: one price everywhere (common practice)
    lmps = [b["lmp"] for b in out["buses"]]
    assert max(lmps) - min(lmps) < 1e-6


def test_summary_names_objective_limits_and_prices(capsys):
    assert main(["opf", "ieee30"]) == 0
    text = capsys.readouterr().out
    assert "AC optimal power flow of ieee30: converged" in text
    assert "objective: 576.89 $/h" in text  # published optimum, from memory
    assert "branch:10:rate_from" in text  # PYPOWER runopf: branch 10 at its rating (MU_SF > 0)
    assert "locational marginal prices: 3.66 $/MWh (bus 1)" in text


def test_unknown_network_exits_2_with_one_line(capsys):
    assert main(["opf", "nosuch"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("Error: nosuch: not a bundled network") and err.count("\n") == 1


def test_network_without_costs_exits_2(tmp_path, capsys):
    net = load_network("ieee14")
    nan = np.full(net.n_gen, np.nan)
    path = tmp_path / "nocost.json"
    write_network_json(net.replace(cost_c2=nan, cost_c1=nan, cost_c0=nan), path)
    assert main(["opf", str(path)]) == 2
    err = capsys.readouterr().err
    assert "no generator costs" in err and "Traceback" not in err and err.count("\n") == 1


def test_overloaded_network_exits_2_naming_the_status(tmp_path, capsys):
    net = load_network("ieee14")
    path = tmp_path / "heavy.json"
    # 3x the 259 MW load exceeds the 772.4 MW of generation capacity (published case data)
    write_network_json(net.with_loads(net.pd_mw * 3, net.qd_mvar * 3), path)
    assert main(["opf", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"Error: {path}: the AC optimal power flow did not converge: infeasible")
