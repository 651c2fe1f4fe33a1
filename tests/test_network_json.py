"""The JSON network format: the schema (checked with jsonschema, a general-purpose validator),
what the reader accepts, its messages, and the CLI exit code 2 for malformed files."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pypower.api import case30

from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.network import (bundled_names, load_network, network_from_dict, network_to_dict,
                               read_network_json, write_network_json)
from flowgauge.network._json import SCHEMA_PATH, _fast_valid

DATA = Path(__file__).resolve().parents[1] / "src" / "flowgauge" / "network" / "data"


@pytest.fixture(scope="module")
def schema():
    return json.loads(SCHEMA_PATH.read_text())


@pytest.fixture(scope="module")
def ieee14_dict():
    return json.loads((DATA / "ieee14.json").read_text())


def test_schema_is_valid_2020_12(schema):
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)  # raises on an invalid schema


def test_schema_path_at_repository_root():
    root = Path(__file__).resolve().parents[1] / "schema" / "network.schema.json"
    assert root.read_bytes() == SCHEMA_PATH.read_bytes()


@pytest.mark.parametrize("name", bundled_names())
def test_every_bundled_file_validates(schema, name):
    data = json.loads((DATA / f"{name}.json").read_text())
    errors = list(jsonschema.Draft202012Validator(schema).iter_errors(data))
    assert errors == []


def test_schema_fields_match_what_the_writer_writes(schema):
    doc = network_to_dict(load_network("ieee14"))
    assert set(schema["properties"]) == set(doc)
    for table, item in (("buses", "bus"), ("loads", "load"), ("generators", "generator"), ("branches", "branch")):
        assert set(schema["$defs"][item]["properties"]) == set(doc[table][0]), table


def test_round_trip_is_byte_identical(tmp_path):
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    write_network_json(load_network("ieee118"), a)
    write_network_json(read_network_json(a), b)
    assert a.read_bytes() == b.read_bytes()


def test_values_match_pypower_case30():
    net = load_network("ieee30")
    ppc = case30()  # source: PYPOWER 5.1.21 case30
    np.testing.assert_array_equal(net.bus_id, ppc["bus"][:, 0])
    np.testing.assert_array_equal(net.x_pu, ppc["branch"][:, 3])
    np.testing.assert_array_equal(net.pmax_mw, ppc["gen"][:, 8])
    np.testing.assert_array_equal(net.rate_mva, ppc["branch"][:, 5])


def test_zero_rating_reads_as_no_limit(ieee14_dict):
    d = copy.deepcopy(ieee14_dict)
    d["branches"][0]["rate_mva"] = 0
    del d["branches"][1]["rate_mva"]
    d["branches"][2]["rate_mva"] = None
    net = network_from_dict(d)
    assert np.isnan(net.rate_mva[:3]).all() and net.rate_mva[3] == 9900.0  # PYPOWER case14 rateA


def _mutated(base, path, value):
    d = copy.deepcopy(base)
    *head, last = path
    target = d
    for p in head:
        target = target[p]
    if value is _DELETE:
        del target[last]
    else:
        target[last] = value
    return d


_DELETE = object()


@pytest.mark.parametrize("path, value, message", [
    (("branches", 3, "x_pu"), "0.2", 'f.json: /branches/3/x_pu: expected number, got "0.2"'),
    (("branches", 3, "x_pu"), _DELETE, "f.json: /branches/3: missing field 'x_pu'"),
    (("loads", 0, "pd_MW"), 1.0, "f.json: /loads/0: unknown field(s) 'pd_MW' (see docs/network-format.md)"),
    (("buses", 2, "type"), "slack", 'f.json: /buses/2/type: expected one of "PQ", "PV", "reference", got "slack"'),
    (("branches", 5, "tap"), 0, "f.json: /branches/5/tap: expected a number > 0, got 0"),
    (("branches", 5, "rate_mva"), -1, "f.json: /branches/5/rate_mva: expected a number >= 0, got -1"),
    (("branches", 5, "in_service"), 1, "f.json: /branches/5/in_service: expected boolean, got 1"),
    (("generators", 0, "id"), 1.5, "f.json: /generators/0/id: expected integer, got 1.5"),
    (("generators", 0, "pg_mw"), True, "f.json: /generators/0/pg_mw: expected number, got true"),
    (("format",), "grid", 'f.json: /format: expected "flowgauge-network", got "grid"'),
    (("format_version",), 2, "f.json: /format_version: expected 1, got 2"),
    (("base_mva",), -100, "f.json: /base_mva: expected a number > 0, got -100"),
    (("buses",), [], "f.json: /buses: expected at least 1 element(s), got 0"),
    (("loads",), {}, "f.json: /loads: expected array, got {}"),
])
def test_schema_errors_name_the_json_pointer(ieee14_dict, path, value, message):
    bad = _mutated(ieee14_dict, path, value)
    with pytest.raises(InputError) as info:
        network_from_dict(bad, source="f.json")
    assert str(info.value) == message


def test_integral_float_ids_are_read_as_integers(ieee14_dict):
    # JSON does not tell 1 from 1.0; jsonschema's "integer" accepts 1.0 too (JSON Schema 2020-12)
    d = _mutated(ieee14_dict, ("loads", 0, "bus"), 2.0)
    assert jsonschema.Draft202012Validator(json.loads(SCHEMA_PATH.read_text())).is_valid(d)
    assert network_from_dict(d).load_bus[0] == 2


_FIELD_VALUES = st.one_of(st.none(), st.booleans(), st.integers(-3, 3), st.floats(-2, 2, allow_nan=False),
                          st.text(max_size=3), st.just([]), st.just({}))


@settings(max_examples=150, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(table=st.sampled_from(["buses", "loads", "generators", "branches"]), row=st.integers(0, 4),
       field=st.text(alphabet="abcdefghijklmnopqrstuvwxyz_", min_size=1, max_size=18) | st.sampled_from(
           ["id", "bus", "type", "vm_pu", "rate_mva", "tap", "in_service", "cost_c1_per_mwh", "x_pu"]),
       value=_FIELD_VALUES, delete=st.booleans())
def test_fast_row_check_never_accepts_what_jsonschema_rejects(ieee14_dict, schema, table, row, field, value, delete):
    # reference: the general-purpose jsonschema validator on the same document
    d = copy.deepcopy(ieee14_dict)
    target = d[table][row]
    if delete:
        target.pop(field, None)
    else:
        target[field] = value
    if not jsonschema.Draft202012Validator(schema).is_valid(d):
        assert not _fast_valid(d)


def test_fast_row_check_accepts_valid_documents(ieee14_dict):
    assert _fast_valid(ieee14_dict)


def test_malformed_file_via_cli_exit_2(tmp_path, capsys, ieee14_dict):
    path = tmp_path / "grid.json"
    path.write_text(json.dumps(_mutated(ieee14_dict, ("branches", 3, "r_pu"), "abc")))
    rc = main(["powerflow", str(path)])
    err = capsys.readouterr().err
    assert rc == 2
    assert err == f'Error: {path}: /branches/3/r_pu: expected number, got "abc"\n'


def test_failed_check_via_cli_exit_2(tmp_path, capsys, ieee14_dict):
    d = _mutated(ieee14_dict, ("branches", 7, "x_pu"), 0.0)  # branch 4-7 has r = 0 already (PYPOWER case14)
    path = tmp_path / "grid.json"
    path.write_text(json.dumps(d))
    rc = main(["powerflow", str(path), "--json"])
    cap = capsys.readouterr()
    assert rc == 2 and cap.out == ""
    assert cap.err.startswith(f"Error: {path}: branch 7 (id 8), x_pu: zero impedance (r_pu = x_pu = 0)")
    assert len(cap.err.strip().splitlines()) == 1


@pytest.mark.parametrize("text, message", [
    ('{"format": "flowgauge-network",\n "base_mva": NaN}', "not valid JSON: NaN is not a JSON number"),
    ('{"format": ', "not valid JSON: Expecting value"),
    ("[1, 2]", "/: expected object, got [1, 2]"),
])
def test_not_json_exit_2(tmp_path, capsys, text, message):
    path = tmp_path / "grid.json"
    path.write_text(text)
    with pytest.raises(InputError, match=r"grid\.json"):
        read_network_json(path)
    rc = main(["powerflow", str(path)])
    err = capsys.readouterr().err
    assert rc == 2 and message in err and str(path) in err
    assert len(err.strip().splitlines()) == 1


def test_not_utf8(tmp_path):
    path = tmp_path / "grid.json"
    path.write_bytes(b'{"name": "\xff"}')
    with pytest.raises(InputError, match=r"grid\.json: not UTF-8 text"):
        read_network_json(path)


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(InputError, match=r"nope\.json: no such file"):
        read_network_json(tmp_path / "nope.json")
    with pytest.raises(InputError, match=r"is a folder; expected a network file"):
        read_network_json(tmp_path)


def test_ids_beyond_64_bits(ieee14_dict):
    d = _mutated(ieee14_dict, ("buses", 0, "id"), 10**30)
    with pytest.raises(InputError, match=r"f\.json: /buses: field 'id': expected integers of at most 18 digits"):
        network_from_dict(d, source="f.json")
