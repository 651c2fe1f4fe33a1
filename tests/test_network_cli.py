"""``flowgauge networks``: sizes and total load of the bundled networks, checked against the
case data shipped in PYPOWER 5.1.21 (the source the IEEE networks were converted from)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from pypower import api
from pypower.idx_bus import PD

from flowgauge.cli import main

PYPOWER_CASES = {"ieee14": "case14", "ieee30": "case30", "ieee57": "case57", "ieee118": "case118",
                 "ieee300": "case300"}


@pytest.fixture(scope="module")
def listing():
    import io
    from contextlib import redirect_stdout

    buf = io.StringIO()
    with redirect_stdout(buf):
        rc = main(["networks", "--json"])
    assert rc == 0
    return json.loads(buf.getvalue())


def test_json_lists_every_bundled_network_demo_first(listing):
    assert [r["name"] for r in listing] == ["demo", "ieee14", "ieee14-limits", "ieee30", "ieee30-limits", "ieee57",
                                            "ieee57-limits", "ieee118", "ieee118-limits", "ieee300", "ieee300-limits",
                                            "activsg200", "pegase1354", "activsg2000", "pegase2869"]
    for r in listing:
        assert {"name", "buses", "branches", "generators", "loads", "total_load_mw", "source"} <= set(r)


@pytest.mark.parametrize("name", list(PYPOWER_CASES))
def test_sizes_and_load_match_pypower(listing, name):
    ppc = getattr(api, PYPOWER_CASES[name])()  # source: PYPOWER's case data
    row = next(r for r in listing if r["name"] == name)
    assert row["buses"] == len(ppc["bus"])
    assert row["branches"] == len(ppc["branch"])
    assert row["generators"] == int(np.count_nonzero(ppc["gen"][:, 7] > 0))
    assert row["total_load_mw"] == pytest.approx(float(np.sum(ppc["bus"][:, PD])), abs=1e-6)
    assert row["source"].startswith("PYPOWER ") and PYPOWER_CASES[name] in row["source"]


def test_published_totals(listing):
    # total load of the IEEE 14-bus system 259.0 MW and of the 118-bus system 4242 MW (published
    # case data, from memory)
    by_name = {r["name"]: r for r in listing}
    assert by_name["ieee14"]["total_load_mw"] == pytest.approx(259.0)
    assert by_name["ieee118"]["total_load_mw"] == pytest.approx(4242.0)
    assert by_name["demo"]["source"] and by_name["demo"]["buses"] >= 20


def test_table(capsys):
    rc = main(["networks"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "Bundled networks" in out
    for header in ("name", "buses", "branches", "gens", "loads", "load MW", "source"):
        assert header in out
    assert max(map(len, out.splitlines())) <= 80  # one line per network at 80 columns
    assert "pypower.case14" in out
    line = next(ln for ln in out.splitlines() if ln.strip().startswith("ieee118"))
    assert line.split()[:6] == ["ieee118", "118", "186", "54", "99", "4,242.0"]  # PYPOWER case118 sizes


def test_unexpected_argument_exit_2(capsys):
    rc = main(["networks", "ieee14"])
    err = capsys.readouterr().err
    assert rc == 2 and "Got unexpected extra argument (ieee14)" in err
