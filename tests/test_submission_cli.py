"""``flowgauge validate`` in-process: exit codes and messages for valid and bad files.

The expected counts come from the IEEE 14-bus system's published data (14 buses, 5
generators); the schema rules themselves are checked against jsonschema in test_submission.py.
"""

from __future__ import annotations

import copy
import json
import re

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from flowgauge.cli import main
from flowgauge.submission import write_predictions
from test_submission import MODEL, known_split, make_arrays, split, valid_doc  # noqa: F401 (fixtures)


def run(capsys, *args):
    rc = main(["validate", *map(str, args)])
    out, err = capsys.readouterr()
    return rc, out, err


def test_valid_json_file(valid_doc, tmp_path, capsys, known_split):
    path = tmp_path / "p.json"
    path.write_text(json.dumps(valid_doc))
    rc, out, err = run(capsys, path)
    assert rc == 0 and err == ""
    assert re.fullmatch(rf"valid {re.escape(str(path))}: 6 samples for ieee14/test-id \(json\)\n"
                        r"  model 'ridge on loads'; fields pg_mw, vm_pu, va_deg, qg_mvar\n"
                        r"  content hash [0-9a-f]{12}\n", out), out
    assert max(map(len, out.splitlines()[1:])) <= 80


def test_valid_parquet_file(split, tmp_path, capsys, known_split):
    a = make_arrays(split)
    write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], model=MODEL, path=tmp_path / "p.parquet")
    rc, out, err = run(capsys, tmp_path / "p.parquet")
    assert rc == 0 and "6 samples for ieee14/test-id (parquet)\n  model 'ridge on loads'; fields pg_mw, vm_pu\n" in out


def _set(doc, k, field, j, value):
    doc["samples"][k][field][j] = value


def _truncate(path):
    data = path.read_bytes()
    path.write_bytes(data[: len(data) * 2 // 3])


# name -> (change to the valid document, or to the written file; expected stderr)
BAD = {
    "not JSON": (lambda p, d: p.write_text("sample_id,pg_mw\n1,2\n"),
                 r"^Error: {path}: not valid JSON: Expecting value at line 1 column 1\n$"),
    "truncated": (lambda p, d: _truncate(p), r"^Error: {path}: not valid JSON: the file ends early \(truncated\?\)"),
    "unknown format": (lambda p, d: d.update(format="predictions-v1"),
                       r"^Error: {path}: /format: unknown file format: format 'predictions-v1'; "
                       r"expected \"format\": \"flowgauge-predictions\"\n$"),
    "unknown version": (lambda p, d: d.update(format_version=3),
                        r"^Error: {path}: /format_version: unsupported format version 3; this flowgauge reads format_version 1\n$"),
    "unknown split hash": (lambda p, d: d["split"].update(split_hash="ab" * 32),
                           r"/split/split_hash: unknown split hash (ab){{32}}: no split under \S+ has it; name the split with "
                           r"--split FOLDER or NETWORK/SPLIT\n$"),
    "missing sample id": (lambda p, d: d["samples"].pop(2), r"/samples: 1 of the split's 6 sample ids is missing: 106"),
    "duplicate sample id": (lambda p, d: d["samples"].append(copy.deepcopy(d["samples"][0])),
                            r"/samples/6/sample_id \(sample 100\): sample id 100 appears more than once"),
    "extra sample id": (lambda p, d: d["samples"][3].update(sample_id=4), r"/samples/3/sample_id \(sample 4\): sample id 4 is not in the split"),
    "wrong array length": (lambda p, d: [s.update(vm_pu=s["vm_pu"][:13]) for s in d["samples"]],
                           r"/samples/0/vm_pu \(sample 100\): has 13 numbers per sample; the split's network has 14 buses"),
    "NaN": (lambda p, d: _set(d, 1, "qg_mvar", 4, float("nan")),
            r"/samples/1/qg_mvar/4 \(sample 103\): NaN is not a number; every value must be finite"),
    "Infinity": (lambda p, d: _set(d, 1, "va_deg", 0, float("inf")),
                 r"/samples/1/va_deg/0 \(sample 103\): Infinity is not a number; every value must be finite"),
    "string": (lambda p, d: _set(d, 1, "pg_mw", 1, "40.0"), r"/samples/1/pg_mw/1: expected a number, got the string '40.0'"),
    "negative voltage": (lambda p, d: _set(d, 0, "vm_pu", 13, -1.036),
                         r"/samples/0/vm_pu/13 \(sample 100\): voltage magnitude -1.036 p.u. is negative; it must be positive"),
    "voltage in kV": (lambda p, d: _set(d, 0, "vm_pu", 13, 14.3),
                      r"/samples/0/vm_pu/13 \(sample 100\): 14.3 p.u. is outside \[0.5, 1.5\]: a value in kV"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_file_exits_2_with_one_clear_message(case, valid_doc, tmp_path, capsys, known_split):
    change, expected = BAD[case]
    path = tmp_path / "p.json"
    doc = copy.deepcopy(valid_doc)
    path.write_text(json.dumps(doc))
    change(path, doc)
    if doc != valid_doc:
        path.write_text(json.dumps(doc))
    rc, out, err = run(capsys, path)
    assert rc == 2 and out == ""
    assert err.startswith(f"Error: {path}: ")
    assert re.search(expected.format(path=re.escape(str(path))), err), err
    assert "Traceback" not in err


def test_truncated_written_file(split, tmp_path, capsys):
    a = make_arrays(split)
    write_predictions(split, **a, model=MODEL, path=tmp_path / "p.json")
    _truncate(tmp_path / "p.json")
    rc, out, err = run(capsys, tmp_path / "p.json")
    assert rc == 2 and re.search(r"not valid JSON: the file ends early \(truncated\?\) at line \d+ column \d+\n$", err)


def test_file_over_the_size_limit(valid_doc, tmp_path, capsys, known_split):
    path = tmp_path / "p.json"
    path.write_text(json.dumps(valid_doc))
    rc, out, err = run(capsys, path, "--max-bytes", "500")
    size = path.stat().st_size
    assert rc == 2 and err == (f"Error: {path}: the file has {size:,} bytes, over the limit of 500 bytes "
                               "(raise it with --max-bytes, or max_bytes= in Python)\n")
    rc, out, err = run(capsys, path, "--max-bytes", "0")
    assert rc == 2 and "Invalid value for '--max-bytes': 0 is not in the range x>=1." in err


def test_parquet_with_a_wrong_column_type(split, tmp_path, capsys, known_split):
    a = make_arrays(split)
    write_predictions(split, pg_mw=a["pg_mw"], vm_pu=a["vm_pu"], model=MODEL, path=tmp_path / "p.parquet")
    table = pq.read_table(tmp_path / "p.parquet")
    table = table.set_column(0, "sample_id", pa.array(split.sample_id.astype(str)))
    pq.write_table(table, tmp_path / "p.parquet")
    rc, out, err = run(capsys, tmp_path / "p.parquet")
    assert rc == 2 and "column sample_id: has type string; expected int64" in err


def test_many_errors_show_twenty_then_the_count(valid_doc, tmp_path, capsys, known_split):
    doc = copy.deepcopy(valid_doc)
    for s in doc["samples"]:
        s["pg_mw"] = [v * 1000.0 + 20000.0 for v in s["pg_mw"]]  # kW: 6 x 5 = 30 errors
    (tmp_path / "p.json").write_text(json.dumps(doc))
    rc, out, err = run(capsys, tmp_path / "p.json")
    lines = err.splitlines()
    assert rc == 2 and lines[0] == f"Error: {tmp_path / 'p.json'}: 30 errors in the predictions file:"
    assert len(lines) == 22 and lines[-1] == "  ... and 10 more errors"
    assert all("MW is over 10 times this generator's limits" in line for line in lines[1:21])


def test_split_folder_that_does_not_exist(valid_doc, tmp_path, capsys):
    (tmp_path / "p.json").write_text(json.dumps(valid_doc))
    rc, out, err = run(capsys, tmp_path / "p.json", "--split", tmp_path / "nowhere")
    assert rc == 2 and err.startswith(f"Error: {tmp_path / 'nowhere'}: ")


def test_missing_file(tmp_path, capsys):
    rc, out, err = run(capsys, tmp_path / "none.json")
    assert rc == 2 and err == f"Error: {tmp_path / 'none.json'}: no such file\n"
