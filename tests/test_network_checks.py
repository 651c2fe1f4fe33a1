"""Load-time checks of a network: each failure names the element, position, id and field.

Base network: the bundled ieee14, built from PYPOWER 5.1.21 case14 (bus 8 hangs on branch
7-8 alone, branches 8-10 are the transformers 4-7, 4-9, 5-6: PYPOWER case14 branch table).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from pypower.api import case14

from flowgauge.errors import InputError
from flowgauge.network import bundled_names, load_network
from flowgauge.network._checks import check_network


@pytest.fixture(scope="module")
def net():
    return load_network("ieee14")


def _with(net, **changes):
    out = {}
    for name, (idx, value) in changes.items():
        a = getattr(net, name).copy()
        a[idx] = value
        out[name] = a
    return net.replace(**out)


def test_every_bundled_network_passes():
    # The IEEE cases are PYPOWER's published case data, which PYPOWER's runpf solves; demo is ours.
    for name in bundled_names():
        check_network(load_network(name), source=name)


def test_bundled_ieee14_counts_match_pypower(net):
    ppc = case14()  # source: PYPOWER case14
    assert (net.n_bus, net.n_gen, net.n_branch) == (len(ppc["bus"]), len(ppc["gen"]), len(ppc["branch"]))


@pytest.mark.parametrize("field, table, idx, value, pattern", [
    ("load_bus", "load", 2, 99, r"t: load 2 \(id 3\), bus: refers to bus 99, which is not in the bus table"),
    ("gen_bus", "generator", 4, 15, r"t: generator 4 \(id 5\), bus: refers to bus 15"),
    ("from_bus", "branch", 0, 0, r"t: branch 0 \(id 1\), from_bus: refers to bus 0"),
    ("to_bus", "branch", 19, -14, r"t: branch 19 \(id 20\), to_bus: refers to bus -14"),
])
def test_reference_to_missing_bus(net, field, table, idx, value, pattern):
    with pytest.raises(InputError, match=pattern):
        check_network(_with(net, **{field: (idx, value)}), source="t")


def test_branch_from_a_bus_to_itself(net):
    with pytest.raises(InputError, match=r"branch 3 \(id 4\), to_bus: branch connects a bus to itself"):
        check_network(_with(net, to_bus=(3, 2)), source="t")


@pytest.mark.parametrize("field, label, table", [
    ("bus_id", "bus", "bus"), ("load_id", "load", "load"), ("gen_id", "generator", "generator"),
    ("branch_id", "branch", "branch"),
])
def test_duplicate_ids(net, field, label, table):
    ids = getattr(net, field)
    bad = _with(net, **{field: (3, ids[1])})  # ids are checked before bus references
    with pytest.raises(InputError, match=rf"t: {label} 3 \(id {int(ids[1])}\), id: duplicate {label} id"):
        check_network(bad, source="t")


def test_limits_in_the_wrong_order(net):
    with pytest.raises(InputError, match=r"bus 5 \(id 6\), vmin_pu: vmin_pu is above vmax_pu"):
        check_network(_with(net, vmin_pu=(5, 1.2)), source="t")
    with pytest.raises(InputError, match=r"generator 1 \(id 2\), pmin_mw: pmin_mw is above pmax_mw"):
        check_network(_with(net, pmin_mw=(1, 500.0)), source="t")
    with pytest.raises(InputError, match=r"generator 2 \(id 3\), qmin_mvar: qmin_mvar is above qmax_mvar"):
        check_network(_with(net, qmin_mvar=(2, 41.0)), source="t")
    with pytest.raises(InputError, match=r"branch 4 \(id 5\), angmin_deg: angmin_deg is above angmax_deg"):
        check_network(_with(net, angmin_deg=(4, 30.0), angmax_deg=(4, 10.0)), source="t")


def test_negative_rating(net):
    with pytest.raises(InputError, match=r"branch 6 \(id 7\), rate_mva: negative rating"):
        check_network(_with(net, rate_mva=(6, -5.0)), source="t")


def test_absent_rating_and_costs_are_allowed(net):
    # NaN means "no thermal limit" / "no costs" (a rating of 0 in published data means no limit,
    # common practice)
    check_network(_with(net, rate_mva=(6, np.nan)), source="t")
    n = net.n_gen
    check_network(net.replace(cost_c2=np.full(n, np.nan), cost_c1=np.full(n, np.nan),
                              cost_c0=np.full(n, np.nan)), source="t")


def test_zero_impedance_branch(net):
    # r = x = 0 makes the series admittance infinite (common practice: such branches are merged)
    with pytest.raises(InputError, match=r"branch 7 \(id 8\), x_pu: zero impedance \(r_pu = x_pu = 0\)"):
        check_network(_with(net, x_pu=(7, 0.0)), source="t")
    check_network(_with(net, r_pu=(7, 0.0)), source="t")  # branch 7 (4-7) already has r = 0: x alone is fine


def test_island_without_reference_bus(net):
    # Branch 14 (7-8) is the only branch at bus 8 (PYPOWER case14): out of service, bus 8 is an island.
    cut = _with(net, in_service=(13, False))
    with pytest.raises(InputError, match=r"t: bus 7 \(id 8\), type: island of 1 bus\(es\) \(ids 8\) over "
                                         r"in-service branches has no reference bus"):
        check_network(cut, source="t")
    # ... and with bus 8 made a reference bus, both islands have one.
    check_network(_with(cut, bus_type=(7, 3)), source="t")


def test_no_reference_bus_at_all(net):
    with pytest.raises(InputError, match=r"island of 14 bus\(es\) \(ids 1, 2, 3, 4, 5, 6, 7, 8, \.\.\.\)"):
        check_network(_with(net, bus_type=(0, 2)), source="t")


@pytest.mark.parametrize("field, table, pos, jname", [
    ("vm_pu", "bus", 3, "vm_pu"), ("pd_mw", "load", 1, "pd_mw"), ("qg_mvar", "generator", 0, "qg_mvar"),
    ("x_pu", "branch", 2, "x_pu"), ("shift_deg", "branch", 9, "shift_deg"),
])
@pytest.mark.parametrize("value", [np.nan, np.inf])
def test_non_finite_numbers(net, field, table, pos, jname, value):
    with pytest.raises(InputError, match=rf"{table} {pos} \(id \d+\), {jname}: non-finite value"):
        check_network(_with(net, **{field: (pos, value)}), source="t")


def test_infinite_rating_or_cost(net):
    with pytest.raises(InputError, match=r"branch 0 \(id 1\), rate_mva: infinite value"):
        check_network(_with(net, rate_mva=(0, np.inf)), source="t")
    with pytest.raises(InputError, match=r"generator 3 \(id 4\), cost_c1_per_mwh: infinite value"):
        check_network(_with(net, cost_c1=(3, -np.inf)), source="t")


def test_costs_all_or_none(net):
    with pytest.raises(InputError, match=r"generator 2 \(id 3\), cost_c0_per_h: cost coefficient is null"):
        check_network(_with(net, cost_c0=(2, np.nan)), source="t")
    n = net.n_gen
    some = net.replace(cost_c2=np.r_[np.nan, net.cost_c2[1:]], cost_c1=np.r_[np.nan, net.cost_c1[1:]],
                       cost_c0=np.r_[np.nan, net.cost_c0[1:]])
    assert n > 1
    with pytest.raises(InputError, match=r"generator 0 \(id 1\), cost_c1_per_mwh: no costs for this generator"):
        check_network(some, source="t")


def test_unknown_bus_type(net):
    with pytest.raises(InputError, match=r"bus 4 \(id 5\), type: unknown bus type 4 \(expected 1 PQ, 2 PV or 3"):
        check_network(_with(net, bus_type=(4, 4)), source="t")


def test_tap_must_be_positive(net):
    with pytest.raises(InputError, match=r"branch 9 \(id 10\), tap: tap ratio must be positive"):
        check_network(_with(net, tap=(9, 0.0)), source="t")


def test_base_mva_must_be_positive(net):
    for bad in (0.0, -100.0, float("nan"), 1e308):
        with pytest.raises(InputError, match=re.escape("t: base_mva: expected a positive number of at most "
                                                       "1e+06 MVA, got ")):
            check_network(net.replace(base_mva=bad), source="t")


def test_arrays_of_one_table_have_one_length(net):
    with pytest.raises(InputError, match=r"t: branch field r_pu: expected shape \(20,\) like branch_id, got \(19,\)"):
        check_network(net.replace(r_pu=net.r_pu[:-1]), source="t")


def test_counts_other_failures(net):
    bad = net.replace(rate_mva=np.full(net.n_branch, -1.0))
    with pytest.raises(InputError, match=r"branch 0 \(id 1\), rate_mva: .*\(19 more branch elements fail"):
        check_network(bad, source="t")
