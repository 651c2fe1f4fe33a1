"""Predictions files: format, loading into arrays, validation against a split, writing.

Outside references used here: the JSON Schema 2020-12 meta-schema and the full schema check
of the ``jsonschema`` library (our samples are checked with numpy, so every schema rule is
tried both ways), ``pyarrow`` reading our Parquet layout directly, Python's own correctly
rounded float formatting for the 10-significant-digit rounding, and the IEEE 14-bus system's
published element counts (14 buses, 5 generators).
"""

from __future__ import annotations

import copy
import json
import re
from pathlib import Path

import jsonschema
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from flowgauge.errors import InputError
from flowgauge.network import load_network
from flowgauge.splits import Split
from flowgauge.splits._manifest import network_hash
from flowgauge.submission import (
    FORMAT_NAME, Predictions, SCHEMA_PATH, check_predictions, load_predictions, predictions_schema,
    validate_predictions, write_predictions,
)
from flowgauge.submission._write import round_sig_array

SPLIT_HASH = "5e" * 32
N_SAMPLES = 6
MODEL = {"name": "ridge on loads", "authors": ["Ada Ferrand"], "description": "A test model.",
         "training_data_only": True}


def make_split(n_samples: int = N_SAMPLES, split_hash: str = SPLIT_HASH) -> Split:
    """A split of ieee14 in memory (sample ids 100, 103, 106, ...); its hash is made up:
    these tests check the predictions, not the split."""
    net = load_network("ieee14")
    manifest = {
        "split": "test-id", "split_hash": split_hash, "samples": n_samples,
        "network": {"name": "ieee14", "content_hash": network_hash(net)},
        "elements": {"bus_id": net.bus_id.tolist(), "gen_id": net.gen_id.tolist(),
                     "load_id": net.load_id.tolist(), "branch_id": net.branch_id.tolist()},
    }
    return Split(path=Path("/nonexistent/split"), manifest=manifest,
                 sample_id=100 + 3 * np.arange(n_samples, dtype=np.int64),
                 pd_mw=np.tile(net.pd_mw, (n_samples, 1)), qd_mvar=np.tile(net.qd_mvar, (n_samples, 1)))


def make_arrays(split: Split, seed: int = 7) -> dict:
    """The network's published solved state (ieee14 data) with a little noise, per sample."""
    net = split.network
    rng = np.random.Generator(np.random.PCG64(seed))
    s = split.n_samples
    return {
        "pg_mw": np.tile(net.pg_mw, (s, 1)) * rng.uniform(0.95, 1.05, (s, net.n_gen)),
        "vm_pu": np.tile(net.vm_pu, (s, 1)) + rng.normal(0, 0.005, (s, net.n_bus)),
        "va_deg": np.tile(net.va_deg, (s, 1)) + rng.normal(0, 0.2, (s, net.n_bus)),
        "qg_mvar": np.tile(net.qg_mvar, (s, 1)) + rng.normal(0, 1.0, (s, net.n_gen)),
    }


@pytest.fixture(scope="module")
def split() -> Split:
    return make_split()


@pytest.fixture
def known_split(split, monkeypatch):
    """Make ``split`` the one known split (as if frozen in the repository)."""
    import flowgauge.splits as splits_pkg

    def find_split(h, root=None):
        if h != split.split_hash:
            raise InputError("no split with this split_hash under splits/", where=h)
        return split.path

    monkeypatch.setattr(splits_pkg, "find_split", find_split)
    monkeypatch.setattr(splits_pkg, "load_split", lambda *a, **k: split)
    return split


def write_json_doc(path: Path, doc) -> Path:
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


@pytest.fixture
def valid_doc(split, tmp_path) -> dict:
    a = make_arrays(split)
    write_predictions(split, **a, inference_ms=np.arange(split.n_samples) + 0.5, model=MODEL,
                      path=tmp_path / "valid.json")
    return json.loads((tmp_path / "valid.json").read_text())


# --- the schema ------------------------------------------------------------------------------

def test_schema_is_a_valid_2020_12_schema():
    # Outside reference: the JSON Schema 2020-12 meta-schema shipped with jsonschema.
    schema = json.loads(SCHEMA_PATH.read_text())
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)
    # The repository's schema/ folder is the package's schema folder.
    assert (Path(__file__).resolve().parents[1] / "schema" / "predictions.schema.json").resolve() == SCHEMA_PATH


def test_written_file_passes_the_full_schema_check(valid_doc):
    # Outside reference: jsonschema checks the whole document, samples included.
    errors = list(jsonschema.Draft202012Validator(predictions_schema()).iter_errors(valid_doc))
    assert errors == []
    assert valid_doc["format"] == FORMAT_NAME and len(valid_doc["samples"]) == N_SAMPLES


# Each case breaks one rule of the schema. jsonschema must reject the document, and so must
# flowgauge (whose sample checks are numpy, not jsonschema), naming the same place.
def _sample(doc, k=0):
    return doc["samples"][k]


SCHEMA_CASES = {
    "top-level extra field": (lambda d: d.update(extra=1), r"/: Additional properties .*'extra'"),
    "samples missing": (lambda d: d.pop("samples"), r"missing required field 'samples'"),
    "samples empty": (lambda d: d.update(samples=[]), r"/samples: \[\] should be non-empty"),
    "samples not an array": (lambda d: d.update(samples={}), r"/samples: \{\} is not of type 'array'"),
    "split missing": (lambda d: d.pop("split"), r"'split' is a required property"),
    "split extra field": (lambda d: d["split"].update(seed=1), r"/split: Additional properties"),
    "split network empty": (lambda d: d["split"].update(network=""), r"/split/network: '' should be non-empty"),
    "split name empty": (lambda d: d["split"].update(split=""), r"/split/split: '' should be non-empty"),
    "split name not a string": (lambda d: d["split"].update(split=3), r"/split/split: 3 is not of type 'string'"),
    "split hash not hex": (lambda d: d["split"].update(split_hash="XYZ"), r"/split/split_hash: 'XYZ' is not a split hash"),
    "split hash missing": (lambda d: d["split"].pop("split_hash"), r"/split: 'split_hash' is a required property"),
    "model missing": (lambda d: d.pop("model"), r"'model' is a required property"),
    "model extra field": (lambda d: d["model"].update(version="2"), r"/model: Additional properties"),
    "model name empty": (lambda d: d["model"].update(name=""), r"/model/name: '' should be non-empty"),
    "model name too long": (lambda d: d["model"].update(name="x" * 201), r"/model/name: .* is too long"),
    "authors empty": (lambda d: d["model"].update(authors=[]), r"/model/authors: \[\] should be non-empty"),
    "author empty": (lambda d: d["model"].update(authors=[""]), r"/model/authors/0: '' should be non-empty"),
    "author too long": (lambda d: d["model"].update(authors=["y" * 201]), r"/model/authors/0: .* is too long"),
    "authors a string": (lambda d: d["model"].update(authors="Ada"), r"/model/authors: 'Ada' is not of type 'array'"),
    "description too long": (lambda d: d["model"].update(description="z" * 5001), r"/model/description: .* is too long"),
    "description missing": (lambda d: d["model"].pop("description"), r"'description' is a required property"),
    "link not http": (lambda d: d["model"].update(link="ftp://x"), r"/model/link: 'ftp://x' does not match"),
    "link too long": (lambda d: d["model"].update(link="https://" + "a" * 2000), r"/model/link: .* is too long"),
    "hardware too long": (lambda d: d["model"].update(inference_hardware="h" * 501), r"/model/inference_hardware: .* is too long"),
    "training flag a string": (lambda d: d["model"].update(training_data_only="yes"), r"/model/training_data_only: 'yes' is not of type 'boolean'"),
    "split not an object": (lambda d: d.update(split="ieee14/test-id"), r"/split: 'ieee14/test-id' is not of type 'object'"),
    "network not a string": (lambda d: d["split"].update(network=14), r"/split/network: 14 is not of type 'string'"),
    "split hash not a string": (lambda d: d["split"].update(split_hash=5), r"/split/split_hash: 5 is not of type 'string'"),
    "model not an object": (lambda d: d.update(model="mine"), r"/model: 'mine' is not of type 'object'"),
    "model name not a string": (lambda d: d["model"].update(name=7), r"/model/name: 7 is not of type 'string'"),
    "author not a string": (lambda d: d["model"].update(authors=[7]), r"/model/authors/0: 7 is not of type 'string'"),
    "description not a string": (lambda d: d["model"].update(description=None), r"/model/description: None is not of type 'string'"),
    "link not a string": (lambda d: d["model"].update(link=1), r"/model/link: 1 is not of type 'string'"),
    "hardware not a string": (lambda d: d["model"].update(inference_hardware=["gpu"]), r"/model/inference_hardware: \['gpu'\] is not of type 'string'"),
    "sample not an object": (lambda d: d["samples"].__setitem__(1, [1, 2]), r"/samples/1: expected an object"),
    "sample extra field": (lambda d: _sample(d).update(pd_mw=[1.0]), r"/samples/0/pd_mw: unknown field 'pd_mw'"),
    "sample id missing": (lambda d: _sample(d).pop("sample_id"), r"/samples/0: missing required field 'sample_id'"),
    "pg_mw missing": (lambda d: _sample(d, 2).pop("pg_mw"), r"/samples/2: missing required field 'pg_mw'"),
    "vm_pu missing": (lambda d: _sample(d, 2).pop("vm_pu"), r"/samples/2: missing required field 'vm_pu'"),
    "sample id a string": (lambda d: _sample(d).update(sample_id="100"), r"/samples/0/sample_id: expected an integer, got the string '100'"),
    "sample id fractional": (lambda d: _sample(d).update(sample_id=100.5), r"/samples/0/sample_id: expected an integer, got 100.5"),
    "sample id negative": (lambda d: _sample(d).update(sample_id=-1), r"/samples/0/sample_id: sample id -1 is out of range"),
    "sample id too large": (lambda d: _sample(d).update(sample_id=2**63), r"/samples/0/sample_id: sample id 9223372036854775808 is out of range"),
    "pg_mw not an array": (lambda d: _sample(d).update(pg_mw=3.0), r"/samples/0/pg_mw: expected an array of numbers, got 3.0"),
    "pg_mw empty": (lambda d: [s.update(pg_mw=[]) for s in d["samples"]], r"/samples/0/pg_mw: is empty"),
    "string in vm_pu": (lambda d: _sample(d, 3)["vm_pu"].__setitem__(4, "1.02"), r"/samples/3/vm_pu/4: expected a number, got the string '1.02'"),
    "null in va_deg": (lambda d: _sample(d, 3)["va_deg"].__setitem__(0, None), r"/samples/3/va_deg/0: expected a number, got null"),
    "true in qg_mvar": (lambda d: _sample(d, 1)["qg_mvar"].__setitem__(2, True), r"/samples/1/qg_mvar/2: expected a number, got true"),
    "nested array in pg_mw": (lambda d: _sample(d, 1)["pg_mw"].__setitem__(2, [1.0]), r"/samples/1/pg_mw/2: expected a number, got an array"),
    "zero voltage": (lambda d: _sample(d, 5)["vm_pu"].__setitem__(7, 0), r"/samples/5/vm_pu/7 \(sample 115\): voltage magnitude 0 p.u. is zero"),
    "negative voltage": (lambda d: _sample(d, 5)["vm_pu"].__setitem__(7, -1.02), r"/samples/5/vm_pu/7 \(sample 115\): voltage magnitude -1.02 p.u. is negative"),
    "inference time negative": (lambda d: _sample(d, 4).update(inference_ms=-2.0), r"/samples/4/inference_ms: -2.0 ms is negative"),
    "inference time a string": (lambda d: _sample(d, 4).update(inference_ms="3 ms"), r"/samples/4/inference_ms: expected a number, got the string '3 ms'"),
}


@pytest.mark.parametrize("case", sorted(SCHEMA_CASES))
def test_every_schema_rule_is_enforced(case, valid_doc, tmp_path, known_split):
    mutate, expected = SCHEMA_CASES[case]
    doc = copy.deepcopy(valid_doc)
    mutate(doc)
    # Outside reference: jsonschema's full check rejects the document.
    assert list(jsonschema.Draft202012Validator(predictions_schema()).iter_errors(doc)), case
    path = write_json_doc(tmp_path / "bad.json", doc)
    try:
        report = validate_predictions(path)
    except InputError as exc:  # a file that cannot be read at all
        text = str(exc)
    else:
        assert not report.valid
        text = report.message()
    assert re.search(expected, text), text


def _constraint_paths(node, path=()):
    """Schema paths of every constraint keyword in the schema (what jsonschema reports as
    ``absolute_schema_path`` when the rule fails)."""
    keywords = {"type", "required", "additionalProperties", "const", "minItems", "minimum", "maximum",
                "exclusiveMinimum", "pattern", "minLength", "maxLength"}
    if isinstance(node, dict):
        for k, v in node.items():
            if k in keywords:
                yield (*path, k)
            if k not in ("description", "title") and isinstance(v, (dict, list)):
                yield from _constraint_paths(v, (*path, k))


def test_every_schema_rule_has_a_case(valid_doc):
    """Guard: each constraint of the schema is broken by at least one case above (the format
    and version constants have their own tests), as jsonschema sees it."""
    schema = predictions_schema()
    rules = set(_constraint_paths(schema))
    hit = set()
    validator = jsonschema.Draft202012Validator(schema)
    for mutate, _ in SCHEMA_CASES.values():
        doc = copy.deepcopy(valid_doc)
        mutate(doc)
        for err in validator.iter_errors(doc):
            hit.add(_resolve_schema_path(schema, tuple(err.absolute_schema_path)))
    # Format and version constants and the document being an object: test_unreadable_files.
    missing = {r for r in rules if r not in hit} - {("properties", "format", "const"),
                                                      ("properties", "format_version", "const"), ("type",)}
    assert missing == set()


def _resolve_schema_path(schema, path, node=None, out=()):
    """Map jsonschema's schema path (which steps through ``$ref`` silently) onto the schema's
    own layout, trying the local keyword first and then the referenced definition."""
    node = schema if node is None else node
    if not path:
        return out
    part, rest = path[0], path[1:]
    if isinstance(node, dict) and part in node:
        found = _resolve_schema_path(schema, rest, node[part], (*out, part))
        if found is not None:
            return found
    if isinstance(node, dict) and "$ref" in node:
        target = tuple(node["$ref"].removeprefix("#/").split("/"))
        ref_node = schema
        for p in target:
            ref_node = ref_node[p]
        return _resolve_schema_path(schema, path, ref_node, target)
    return None


# --- loading -----------------------------------------------------------------------------------

def test_json_and_parquet_load_the_same_arrays_and_hash(split, tmp_path):
    a = make_arrays(split)
    ms = np.array([1.5, np.nan, 2.0, 3.25, np.nan, 0.0])
    pj = write_predictions(split, **a, inference_ms=ms, model=MODEL, path=tmp_path / "p.json")
    pp = write_predictions(split, **a, inference_ms=ms, model=MODEL, path=tmp_path / "p.parquet")
    lj, lp = load_predictions(tmp_path / "p.json"), load_predictions(tmp_path / "p.parquet")
    assert (lj.format, lp.format) == ("json", "parquet")
    assert lj.content_hash == lp.content_hash == pj.content_hash == pp.content_hash
    # ieee14 (published data): 14 buses, 5 generators.
    assert lj.pg_mw.shape == (N_SAMPLES, 5) and lj.vm_pu.shape == (N_SAMPLES, 14)
    for field in ("pg_mw", "vm_pu", "va_deg", "qg_mvar"):
        # Outside reference: Python's correctly rounded formatting to 10 significant digits.
        expected = np.array([[float(f"{v:.9e}") for v in row] for row in a[field]])
        np.testing.assert_array_equal(getattr(lj, field), expected)
        np.testing.assert_array_equal(getattr(lp, field), expected)
    np.testing.assert_array_equal(lj.inference_ms, ms)
    np.testing.assert_array_equal(lj.sample_id, split.sample_id)


def test_parquet_layout_as_pyarrow_reads_it(split, tmp_path):
    a = make_arrays(split)
    write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], model=MODEL, path=tmp_path / "p.parquet")
    table = pq.read_table(tmp_path / "p.parquet")  # outside reference: pyarrow's own reader
    assert table.column_names == ["sample_id", "pg_mw", "vm_pu"]
    assert table.schema.field("sample_id").type == pa.int64()
    assert table.schema.field("pg_mw").type == pa.list_(pa.float64(), 5)
    assert table.schema.field("vm_pu").type == pa.list_(pa.float64(), 14)
    header = json.loads(table.schema.metadata[b"flowgauge"])
    assert header == {"format": "flowgauge-predictions", "format_version": 1, "model": MODEL,
                      "split": {"network": "ieee14", "split": "test-id", "split_hash": SPLIT_HASH}}
    assert table.column("sample_id").to_pylist() == [100, 103, 106, 109, 112, 115]


def test_round_sig_matches_python_formatting():
    # Outside reference: Python's float formatting (correctly rounded, ties to even).
    rng = np.random.Generator(np.random.PCG64(3))
    values = np.concatenate([
        rng.normal(0, 1e3, 5000), 10.0 ** rng.uniform(-320, 308, 2000),
        rng.integers(-10**12, 10**12, 2000) / 100.0,  # many exact ties at the 11th digit
        [1234567890.5, 1234567891.5, 9.9999999995, 9.99999999949, 99999999995.0, 1e22, 1e-12, 0.1,
         -0.0, 0.0, 5e-324, 1.7976931348623157e308]])
    expected = np.array([float(f"{v:.9e}") + 0.0 for v in values.tolist()])
    np.testing.assert_array_equal(round_sig_array(values), expected)
    assert np.signbit(round_sig_array(np.array([-0.0]))).tolist() == [False]


def test_json_lines_are_canonical_json(split, tmp_path):
    # Outside reference: the standard json module's own encoding with sorted keys, applied to
    # the numbers rounded by Python's formatting to 10 significant digits.
    a = make_arrays(split)
    write_predictions(split, **a, model=MODEL, path=tmp_path / "p.json")
    lines = (tmp_path / "p.json").read_text().splitlines()
    assert len(lines) == N_SAMPLES + 2
    for k, line in enumerate(lines[1:-1]):
        sample = {f: [float(f"{v:.9e}") + 0.0 for v in a[f][k].tolist()] for f in a}
        sample["sample_id"] = 100 + 3 * k
        assert line.rstrip(",") == json.dumps(sample, sort_keys=True, separators=(",", ":"))


def test_hash_ignores_sample_order_and_whitespace(valid_doc, tmp_path):
    h0 = load_predictions(write_json_doc(tmp_path / "a.json", valid_doc)).content_hash
    shuffled = copy.deepcopy(valid_doc)
    shuffled["samples"].reverse()
    (tmp_path / "b.json").write_text(json.dumps(shuffled, indent=3))
    b = load_predictions(tmp_path / "b.json")
    assert b.content_hash == h0
    assert b.sample_id.tolist() == [100, 103, 106, 109, 112, 115]
    assert b.row.tolist() == [5, 4, 3, 2, 1, 0]  # file positions, for messages
    changed = copy.deepcopy(valid_doc)
    changed["samples"][2]["pg_mw"][0] += 1e-6
    assert load_predictions(write_json_doc(tmp_path / "c.json", changed)).content_hash != h0


def test_writing_twice_gives_the_same_bytes(split, tmp_path):
    a = make_arrays(split)
    for name in ("x.json", "y.json", "x.parquet", "y.parquet"):
        write_predictions(split, **a, model=MODEL, path=tmp_path / name)
    assert (tmp_path / "x.json").read_bytes() == (tmp_path / "y.json").read_bytes()
    assert (tmp_path / "x.parquet").read_bytes() == (tmp_path / "y.parquet").read_bytes()


def test_optional_fields_absent_are_none(split, tmp_path):
    a = make_arrays(split)
    p = write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], model=MODEL, path=tmp_path / "p.json")
    loaded = load_predictions(tmp_path / "p.json")
    assert loaded.va_deg is None and loaded.qg_mvar is None and p.fields == ("pg_mw", "vm_pu")
    assert np.isnan(loaded.inference_ms).all()
    doc = json.loads((tmp_path / "p.json").read_text())
    assert set(doc["samples"][0]) == {"sample_id", "pg_mw", "vm_pu"}


def test_optional_field_for_some_samples_only(valid_doc, tmp_path):
    doc = copy.deepcopy(valid_doc)
    for s in doc["samples"][:2]:
        del s["qg_mvar"]
    with pytest.raises(InputError, match=r"/samples/0: qg_mvar is missing here but given for 4 "
                                         r"other samples; give it for every sample or for none"):
        load_predictions(write_json_doc(tmp_path / "p.json", doc))


def test_load_reports_ragged_rows(valid_doc, tmp_path):
    doc = copy.deepcopy(valid_doc)
    doc["samples"][4]["vm_pu"].append(1.0)
    with pytest.raises(InputError, match=r"/samples/4/vm_pu: has 15 numbers but the other samples have 14"):
        load_predictions(write_json_doc(tmp_path / "p.json", doc))


# --- validation against the split ----------------------------------------------------------------

def test_valid_file_against_known_split(valid_doc, tmp_path, known_split):
    report = check_predictions(write_json_doc(tmp_path / "p.json", valid_doc))
    assert report.valid and report.errors == () and report.n_errors == 0
    assert report.split is known_split and isinstance(report.predictions, Predictions)


def _validate(doc, tmp_path, split=None) -> str:
    report = validate_predictions(write_json_doc(tmp_path / "p.json", doc), split)
    assert not report.valid
    return report.message()


def test_unknown_split_hash(valid_doc, tmp_path, monkeypatch):
    # The splits package's own lookup, over an empty folder of frozen splits.
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(tmp_path / "no-splits"))
    doc = copy.deepcopy(valid_doc)
    doc["split"]["split_hash"] = "0" * 64
    assert re.search(r"/split/split_hash: unknown split hash 0{64}: no split under \S+ has it; name the split with --split",
                     _validate(doc, tmp_path))


def test_split_given_does_not_match(valid_doc, tmp_path):
    other = make_split(split_hash="7" * 64)
    assert re.search(r"/split/split_hash: the file answers split 5e5e.* but was checked against split 7777",
                     _validate(valid_doc, tmp_path, other))


def test_header_names_another_network(valid_doc, tmp_path, split):
    doc = copy.deepcopy(valid_doc)
    doc["split"]["network"] = "ieee30"
    assert re.search(r"/split/network: 'ieee30' does not match the manifest .* which says 'ieee14'",
                     _validate(doc, tmp_path, split))


def test_missing_duplicate_and_extra_sample_ids(valid_doc, tmp_path, split):
    doc = copy.deepcopy(valid_doc)
    doc["samples"][1]["sample_id"] = 100  # duplicate of sample 0; 103 now missing
    doc["samples"][5]["sample_id"] = 999  # not in the split; 115 now missing
    text = _validate(doc, tmp_path, split)
    assert text.startswith("3 errors in the predictions file:")
    assert "/samples/1/sample_id (sample 100): sample id 100 appears more than once (first at /samples/0/sample_id)" in text
    assert "/samples/5/sample_id (sample 999): sample id 999 is not in the split" in text
    assert "/samples: 2 of the split's 6 sample ids are missing: 103, 115" in text


def test_wrong_array_lengths(valid_doc, tmp_path, split):
    doc = copy.deepcopy(valid_doc)
    for s in doc["samples"]:
        s["pg_mw"] = s["pg_mw"][:4]
        s["va_deg"] = s["va_deg"] + [0.0]
    text = _validate(doc, tmp_path, split)
    # ieee14 (published data): 5 generators, 14 buses.
    assert "/samples/0/pg_mw (sample 100): has 4 numbers per sample; the split's network has 5 generators" in text
    assert "/samples/0/va_deg (sample 100): has 15 numbers per sample; the split's network has 14 buses" in text


@pytest.mark.parametrize("literal, name", [("NaN", "NaN"), ("Infinity", "Infinity"), ("-Infinity", "-Infinity"),
                                           ("1e400", "Infinity")])
def test_non_finite_numbers(valid_doc, tmp_path, split, literal, name):
    # Python's json module accepts NaN and Infinity literals (and 1e400 overflows to inf):
    # the file must still be rejected.
    doc = copy.deepcopy(valid_doc)
    doc["samples"][0]["pg_mw"][0] = "PLACEHOLDER"
    (tmp_path / "p.json").write_text(json.dumps(doc).replace('"PLACEHOLDER"', literal))
    message = validate_predictions(tmp_path / "p.json", split).message()
    assert re.search(rf"/samples/0/pg_mw/0 \(sample 100\): {name} is not a number; every value must be finite",
                     message), message


def test_implausible_units(valid_doc, tmp_path, split):
    doc = copy.deepcopy(valid_doc)
    doc["samples"][2]["vm_pu"][0] = 145.2  # kV at a 138 kV bus, not p.u.
    doc["samples"][3]["pg_mw"][0] = 232400.0  # kW, not MW (ieee14 generator 1: 232.4 MW published)
    doc["samples"][3]["va_deg"][5] = -725.0
    text = _validate(doc, tmp_path, split)
    assert "/samples/2/vm_pu/0 (sample 106): 145.2 p.u. is outside [0.5, 1.5]: a value in kV, or a scaling slip?" in text
    assert "/samples/3/pg_mw/0 (sample 109): 232400 MW is over 10 times this generator's limits" in text
    assert "/samples/3/va_deg/5 (sample 109): -725 degrees is outside [-360, 360]" in text


def test_more_than_twenty_errors_are_counted(valid_doc, tmp_path, split):
    doc = copy.deepcopy(valid_doc)
    for s in doc["samples"]:
        s["vm_pu"] = [v * 138.0 for v in s["vm_pu"]]  # all in kV: 6 x 14 = 84 errors
    message = _validate(doc, tmp_path, split)
    lines = message.splitlines()
    assert lines[0] == "84 errors in the predictions file:"
    assert len(lines) == 22 and lines[-1] == "  ... and 64 more errors"


def test_check_predictions_raises_with_the_file_named(valid_doc, tmp_path, split):
    doc = copy.deepcopy(valid_doc)
    doc["samples"][0]["vm_pu"][3] = -1.0
    path = write_json_doc(tmp_path / "p.json", doc)
    with pytest.raises(InputError, match=r"1 error in the predictions file:\n  /samples/0/vm_pu/3 "
                                         r"\(sample 100\): voltage magnitude -1 p.u. is negative") as info:
        check_predictions(path, split)
    assert info.value.where == str(path)


# --- files that cannot be read ------------------------------------------------------------------

@pytest.mark.parametrize("content, message", [
    (b"flowgauge predictions\n1,2,3\n", r"not valid JSON: Expecting value at line 1 column 1"),
    (b"", r"the file is empty"),
    (b"\xff\xfe{}", r"not UTF-8 text \(byte 0\)"),
    (b"[1, 2]", r"expected a JSON object with \"format\": \"flowgauge-predictions\", got an array"),
    (b'{"format": "predictions", "format_version": 1}', r"/format: unknown file format: format 'predictions'"),
    (b'{"format_version": 1}', r"/format: unknown file format: no \"format\" field"),
    (b'{"format": "flowgauge-predictions", "format_version": 2}', r"/format_version: unsupported format version 2"),
    (b'{"format": "flowgauge-predictions", "format_version": true}', r"unsupported format version True"),
    (b"[" * 100000, r"not valid JSON"),
])
def test_unreadable_files(tmp_path, content, message):
    (tmp_path / "p.json").write_bytes(content)
    with pytest.raises(InputError, match=message):
        load_predictions(tmp_path / "p.json")


def test_truncated_file(valid_doc, tmp_path):
    data = json.dumps(valid_doc).encode()
    (tmp_path / "p.json").write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match=r"not valid JSON: the file ends early \(truncated\?\) at line 1"):
        load_predictions(tmp_path / "p.json")


def test_file_over_the_size_limit(valid_doc, tmp_path):
    path = write_json_doc(tmp_path / "p.json", valid_doc)
    size = path.stat().st_size
    with pytest.raises(InputError, match=rf"the file has {size:,} bytes, over the limit of 1,000 bytes"):
        load_predictions(path, max_bytes=1000)
    assert load_predictions(path, max_bytes=size).n_samples == N_SAMPLES


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        load_predictions(tmp_path / "nothing.json")


# --- Parquet with the wrong layout ---------------------------------------------------------------

def _parquet(tmp_path, columns: dict, header: dict | None) -> Path:
    table = pa.table(columns)
    if header is not None:
        table = table.replace_schema_metadata({b"flowgauge": json.dumps(header).encode()})
    pq.write_table(table, tmp_path / "p.parquet")
    return tmp_path / "p.parquet"


@pytest.fixture
def parquet_parts(split):
    a = make_arrays(split)
    header = {"format": FORMAT_NAME, "format_version": 1, "model": MODEL,
              "split": {"network": "ieee14", "split": "test-id", "split_hash": SPLIT_HASH}}
    cols = {"sample_id": pa.array(split.sample_id, pa.int64()),
            "pg_mw": pa.array(a["pg_mw"].tolist(), pa.list_(pa.float64())),
            "vm_pu": pa.array(a["vm_pu"].tolist(), pa.list_(pa.float64()))}
    return cols, header


def test_parquet_with_plain_lists_is_valid(tmp_path, parquet_parts, split):
    cols, header = parquet_parts
    assert check_predictions(_parquet(tmp_path, cols, header), split).valid


@pytest.mark.parametrize("column, array, message", [
    ("sample_id", pa.array([100.0, 103, 106, 109, 112, 115]), r"column sample_id: has type double; expected int64"),
    ("pg_mw", pa.array([["1"] * 5] * 6, pa.list_(pa.string())), r"column pg_mw: has type list<\w+: string>; expected list<double>"),
    ("vm_pu", pa.array([1.0] * 6), r"column vm_pu: has type double; expected list<double>"),
    ("vm_pu", pa.array([[1.0] * 14] * 6, pa.list_(pa.float32())), r"column vm_pu: has type list<\w+: float>; expected list<double>"),
    ("inference_ms", pa.array(["1"] * 6), r"column inference_ms: has type string; expected double"),
    ("qd_mvar", pa.array([[1.0]] * 6), r"column qd_mvar: unknown column"),
    ("va_deg", pa.array([[0.0] * 14] * 5 + [None], pa.list_(pa.float64())), r"column va_deg, row 5: is null; give the column for every row or drop it"),
    ("pg_mw", pa.array([[1.0] * 5] * 5 + [[1.0, None, 1.0, 1.0, 1.0]], pa.list_(pa.float64())), r"column pg_mw, row 5, item 1: is null; expected a number"),
    ("pg_mw", pa.array([[1.0] * 5] * 5 + [[1.0] * 4], pa.list_(pa.float64())), r"column pg_mw, row 5: has 4 numbers but the other rows have 5"),
])
def test_parquet_with_wrong_columns(tmp_path, parquet_parts, column, array, message):
    cols, header = parquet_parts
    with pytest.raises(InputError, match=message):
        load_predictions(_parquet(tmp_path, {**cols, column: array}, header))


def test_parquet_missing_column_and_header(tmp_path, parquet_parts):
    cols, header = parquet_parts
    with pytest.raises(InputError, match=r"column vm_pu: missing required column"):
        load_predictions(_parquet(tmp_path, {k: v for k, v in cols.items() if k != "vm_pu"}, header))
    with pytest.raises(InputError, match=r"no 'flowgauge' key holding the header"):
        load_predictions(_parquet(tmp_path, cols, None))
    with pytest.raises(InputError, match=r"/model/authors: \[\] should be non-empty"):
        load_predictions(_parquet(tmp_path, cols, {**header, "model": {**MODEL, "authors": []}}))


def test_truncated_parquet(tmp_path, split):
    write_predictions(split, **make_arrays(split), model=MODEL, path=tmp_path / "p.parquet")
    data = (tmp_path / "p.parquet").read_bytes()
    (tmp_path / "p.parquet").write_bytes(data[: len(data) - 40])
    with pytest.raises(InputError, match=r"not a readable Parquet file"):
        load_predictions(tmp_path / "p.parquet")


# --- writing ---------------------------------------------------------------------------------------

def test_write_checks_shapes(split, tmp_path):
    a = make_arrays(split)
    with pytest.raises(InputError, match=r"vm_pu: has shape \(6, 13\); expected \(6, 14\): one row per "
                                         r"sample of the split, one column per bus"):
        write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"][:, :13], model=MODEL, path=tmp_path / "p.json")
    with pytest.raises(InputError, match=r"qg_mvar: has shape \(5, 5\); expected \(6, 5\)"):
        write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], qg_mvar=a["qg_mvar"][:5], model=MODEL,
                          path=tmp_path / "p.json")
    with pytest.raises(InputError, match=r"inference_ms: has shape \(2,\); expected \(6,\)"):
        write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], inference_ms=[1, 2], model=MODEL,
                          path=tmp_path / "p.json")
    assert not (tmp_path / "p.json").exists()


def test_write_checks_model_and_format(split, tmp_path):
    a = make_arrays(split)
    with pytest.raises(InputError, match=r"model: 'training_data_only' is a required property"):
        write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"],
                          model={k: v for k, v in MODEL.items() if k != "training_data_only"}, path=tmp_path / "p.json")
    with pytest.raises(InputError, match=r"The 'format' parameter of write_predictions must be one of "
                                         r"\('json', 'parquet'\). Got 'csv' instead."):
        write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], model=MODEL, path=tmp_path / "p.json",
                          format="csv")
    with pytest.raises(InputError, match=r"cannot tell the format from the suffix '.txt'"):
        write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], model=MODEL, path=tmp_path / "p.txt")


def test_write_refuses_invalid_values_and_leaves_the_old_file(split, tmp_path):
    a = make_arrays(split)
    path = tmp_path / "p.json"
    write_predictions(split, **a, model=MODEL, path=path)
    before = path.read_bytes()
    bad = a["vm_pu"].copy()
    bad[2, 3] = np.nan
    with pytest.raises(InputError, match=r"write_predictions: 1 error in the arrays to write:\n  vm_pu\[2, 3\] "
                                         r"\(sample 106\): NaN is not a number"):
        write_predictions(split, pg_mw=a["pg_mw"], vm_pu=bad, model=MODEL, path=path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.json"]  # no temporary file left



def test_documented_example_is_valid(tmp_path):
    """The minimal complete example in docs/submission.md passes jsonschema (outside reference)
    and flowgauge's own reading; the demo network (bundled) has 9 generators and 28 buses."""
    text = (Path(__file__).resolve().parents[1] / "docs" / "submission.md").read_text()
    block = re.search(r"```json\n(.*?)```", text, re.S).group(1)
    doc = json.loads(block)
    assert list(jsonschema.Draft202012Validator(predictions_schema()).iter_errors(doc)) == []
    (tmp_path / "example.json").write_text(block)
    pred = load_predictions(tmp_path / "example.json")
    net = load_network("demo")
    assert pred.pg_mw.shape == (1, net.n_gen) == (1, 9) and pred.vm_pu.shape == (1, net.n_bus) == (1, 28)
