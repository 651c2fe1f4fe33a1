"""Random damage to valid predictions files never produces a traceback: the library raises
only InputError (or returns a report), and ``flowgauge validate`` exits only 0 or 2.

Common practice (fuzzing): start from a valid file, then change bytes or JSON values at random.
"""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import flowgauge.splits as splits_pkg
from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.submission import validate_predictions, write_predictions
from test_submission import MODEL, make_arrays, make_split

SETTINGS = settings(max_examples=120, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Valid JSON and Parquet files of a 3-sample ieee14 split, which is made the known split."""
    split = make_split(n_samples=3)
    folder = tmp_path_factory.mktemp("fuzz")
    for name in ("valid.json", "valid.parquet"):
        write_predictions(split, **make_arrays(split), inference_ms=[1.0, 2.0, 3.0], model=MODEL,
                          path=folder / name)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(splits_pkg, "find_split", lambda h, root=None: split.path if h == split.split_hash
                   else (_ for _ in ()).throw(InputError("no split with this split_hash", where=h)))
        mp.setattr(splits_pkg, "load_split", lambda *a, **k: split)
        yield folder


def _check(path, capsys):
    """The library gives a report or an InputError; the CLI exits 0 or 2, never with a traceback."""
    try:
        report = validate_predictions(path)
    except InputError as exc:
        assert str(exc)
        valid = False
    else:
        valid = report.valid
        assert report.n_errors >= len(report.errors)
    rc = main(["validate", str(path)])
    out, err = capsys.readouterr()
    assert rc == (0 if valid else 2), err
    assert "Traceback" not in err
    assert (err.startswith("Error: ") if rc else out.startswith("valid "))


_ops = st.lists(st.tuples(st.sampled_from(["flip", "insert", "delete", "truncate", "repeat"]),
                          st.floats(0, 1, exclude_max=True), st.integers(0, 255)), min_size=1, max_size=4)


def _damage(data: bytes, ops) -> bytes:
    b = bytearray(data)
    for kind, where, value in ops:
        i = int(where * len(b)) if b else 0
        if kind == "flip" and b:
            b[i] ^= 1 << (value % 8)
        elif kind == "insert":
            b[i:i] = bytes([value])
        elif kind == "delete" and b:
            del b[i: i + 1 + value % 16]
        elif kind == "truncate":
            del b[i:]
        elif kind == "repeat" and b:
            b[i:i] = b[i: i + 1 + value % 32]
    return bytes(b)


@SETTINGS
@given(ops=_ops)
def test_damaged_json_bytes(files, tmp_path_factory, capsys, ops):
    path = files / "damaged.json"
    path.write_bytes(_damage((files / "valid.json").read_bytes(), ops))
    _check(path, capsys)


@SETTINGS
@given(ops=_ops)
def test_damaged_parquet_bytes(files, capsys, ops):
    path = files / "damaged.parquet"
    path.write_bytes(_damage((files / "valid.parquet").read_bytes(), ops))
    _check(path, capsys)


_json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-2**70, 2**70) | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=3),
    max_leaves=8)


def _paths(node, path=()):
    yield path
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*path, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, (*path, i))


@SETTINGS
@given(data=st.data())
def test_changed_json_values(files, capsys, data):
    doc = json.loads((files / "valid.json").read_text())
    for _ in range(data.draw(st.integers(1, 3))):
        paths = [p for p in _paths(doc) if p]
        path = data.draw(st.sampled_from(paths))
        parent = doc
        for part in path[:-1]:
            parent = parent[part]
        action = data.draw(st.sampled_from(["replace", "delete", "add", "scale"]))
        if action == "replace":
            parent[path[-1]] = data.draw(_json_values)
        elif action == "delete":
            del parent[path[-1]]
        elif action == "add" and isinstance(parent, dict):
            parent[data.draw(st.text(max_size=10))] = data.draw(_json_values)
        elif action == "scale" and isinstance(parent[path[-1]], (int, float)) and not isinstance(parent[path[-1]], bool):
            factor = data.draw(st.sampled_from([-1.0, 0.0, 1e-3, 1e3, math.inf, math.nan]))
            parent[path[-1]] = parent[path[-1]] * factor
        if not isinstance(doc, dict):
            break
    out = files / "changed.json"
    out.write_text(json.dumps(doc))
    _check(out, capsys)
