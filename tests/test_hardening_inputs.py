"""Bad inputs of every kind give one line and exit 2: files without bounds, hostile JSON,
numbers out of range, and text from submitters on the console.

Expected messages are the project's own; physical facts used: a network needs a branch to
carry power between buses (common practice); float64 tops out near 1.8e308 (IEEE 754)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import flowgauge
from flowgauge._io import clip_text, parse_json, read_input_bytes, safe_text
from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.network import load_network, network_to_dict
from flowgauge.splits import load_split
from flowgauge.submission import write_predictions

MODEL = {"name": "m", "authors": ["a"], "description": "d", "training_data_only": True}


@pytest.fixture(scope="module")
def split():
    return load_split("ieee14", "test-id", references=False)


@pytest.fixture(scope="module")
def good_doc(split, tmp_path_factory) -> dict:
    path = tmp_path_factory.mktemp("g") / "good.json"
    write_predictions(split, pg_mw=np.zeros((split.n_samples, len(split.gen_id))),
                      vm_pu=np.ones((split.n_samples, len(split.bus_id))), path=path, model=MODEL)
    return json.loads(path.read_text())


def run(capsys, *args):
    rc = main([*map(str, args)])
    out, err = capsys.readouterr()
    return rc, out, err


# --- files without bounds ------------------------------------------------------------------

def test_a_device_is_refused_before_reading(capsys):
    rc, _, err = run(capsys, "validate", "/dev/zero", "--max-bytes", "1000")
    assert rc == 2
    assert err == ("Error: /dev/zero: is a device, not a regular file; expected a predictions file "
                   "(.json or .parquet)\n")


@pytest.mark.parametrize("command", [["validate"], ["powerflow"]])
def test_a_fifo_without_writer_is_refused_without_blocking(tmp_path, command):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    t0 = time.monotonic()
    done = subprocess.run([sys.executable, "-c", "from flowgauge.cli import run; run()", *command, str(fifo)],
                          capture_output=True, text=True, timeout=60)
    assert time.monotonic() - t0 < 60
    assert done.returncode == 2
    assert done.stderr.endswith(f"{fifo}: is a FIFO (named pipe), not a regular file; expected "
                                + ("a network file\n" if command == ["powerflow"] else
                                   "a predictions file (.json or .parquet)\n"))


def test_reading_stops_at_the_cap_whatever_the_size_claims(tmp_path):
    path = tmp_path / "f.bin"
    path.write_bytes(b"x" * 5000)
    with pytest.raises(InputError, match=r"the file has 5,000 bytes, over the limit of 1,000 bytes"):
        read_input_bytes(path, max_bytes=1000)
    assert read_input_bytes(path, max_bytes=5000) == b"x" * 5000


def test_default_cap_reflects_memory(capsys):
    from flowgauge.submission import DEFAULT_MAX_BYTES
    # measured: 26 bytes of memory per byte of "[[],[],...]"; the cap keeps that near 5 GB
    assert DEFAULT_MAX_BYTES == 200 * 10**6
    assert main(["validate", "--help"]) == 0
    assert "200000000" in capsys.readouterr().out


# --- hostile JSON --------------------------------------------------------------------------

def test_duplicate_keys_are_refused_naming_key_and_place(good_doc, tmp_path, capsys):
    path = tmp_path / "dup.json"
    path.write_text(json.dumps(good_doc).replace("{", '{"format": "evil", ', 1))
    rc, _, err = run(capsys, "validate", path)
    assert rc == 2
    assert err == (f"Error: {path}: key 'format' is given twice in the object starting at line 1 column 1; "
                   "each key may appear once per object\n")


def test_duplicate_key_in_a_nested_object():
    with pytest.raises(InputError, match=r"^f: key 'x' is given twice in the object starting at line 2 column 7"):
        parse_json('{"a": 1,\n "b": {"x": 1, "x": 2}}', where="f")


def test_inference_ms_as_a_400_digit_integer(good_doc, tmp_path, capsys):
    doc = json.loads(json.dumps(good_doc))
    doc["samples"][0]["inference_ms"] = 10**400
    path = tmp_path / "big.json"
    path.write_text(json.dumps(doc))
    rc, _, err = run(capsys, "validate", path)
    assert rc == 2
    assert err.splitlines()[1] == "  /samples/0/inference_ms: the integer 100000000000... (401 digits) is too large"


def test_lone_surrogate_in_the_model_name(good_doc, tmp_path, capsys):
    path = tmp_path / "s.json"
    path.write_text(json.dumps(good_doc).replace('"name": "m"', '"name": "\\ud800"'))
    rc, _, err = run(capsys, "validate", path)
    assert rc == 2
    assert err == (f"Error: {path}: /model/name: the text holds a lone surrogate (an escape \\ud800 to \\udfff "
                   "outside a pair): not valid Unicode\n")


def test_lone_surrogate_in_a_parquet_header(split, tmp_path, capsys):
    path = tmp_path / "p.parquet"
    write_predictions(split, pg_mw=np.zeros((split.n_samples, len(split.gen_id))),
                      vm_pu=np.ones((split.n_samples, len(split.bus_id))), path=path, model=MODEL)
    t = pq.read_table(path)
    header = t.schema.metadata[b"flowgauge"].replace(b'"name":"m"', b'"name":"\\ud800"')
    pq.write_table(t.replace_schema_metadata({b"flowgauge": header}), path)
    rc, _, err = run(capsys, "validate", path)
    assert rc == 2
    assert err.startswith(f"Error: {path}: metadata flowgauge: /model/name: the text holds a lone surrogate")


def test_deeply_nested_network_json(tmp_path, capsys):
    path = tmp_path / "deep.json"
    path.write_text('{"a":' * 100_000 + "1" + "}" * 100_000)
    rc, _, err = run(capsys, "powerflow", path)
    assert rc == 2
    assert err == f"Error: {path}: not valid JSON: arrays or objects nested too deeply\n"


def test_deeply_nested_manifest(tmp_path, capsys):
    folder = tmp_path / "split"
    folder.mkdir()
    (folder / "manifest.json").write_text("[" * 100_000 + "]" * 100_000)
    rc, _, err = run(capsys, "splits", "verify", folder)
    assert rc in (2, 3)
    assert err.startswith("Error: ") and "nested too deeply" in err and err.count("\n") == 1


def test_an_error_echoes_at_most_200_characters_of_a_value():
    assert clip_text("x" * 10_000_000) == "x" * 200 + "... (10,000,000 characters)"


def test_a_10_million_character_model_name_gives_a_short_error(good_doc, tmp_path, capsys):
    doc = json.loads(json.dumps(good_doc))
    doc["model"]["name"] = "n" * 10_000_000
    path = tmp_path / "long.json"
    path.write_text(json.dumps(doc))
    rc, _, err = run(capsys, "validate", path)
    assert rc == 2
    assert len(err) < 2000 and "/model/name" in err


# --- networks: range rule and structure -------------------------------------------------------

def _network_file(tmp_path, **change) -> Path:
    d = network_to_dict(load_network("ieee14"))
    d.update(change)
    path = tmp_path / "net.json"
    path.write_text(json.dumps(d))
    return path


def test_one_bus_network_without_branch(tmp_path, capsys):
    d = network_to_dict(load_network("ieee14"))
    path = _network_file(tmp_path, buses=[dict(d["buses"][0], type="reference")], branches=[],
                         generators=[d["generators"][0]], loads=[dict(d["loads"][0], bus=1)])
    rc, _, err = run(capsys, "powerflow", path)
    assert rc == 2
    assert err == (f"Error: {path}: branches: the network has no branch in service; expected at least two "
                   "buses joined by a branch\n")


def test_base_mva_1e308_in_opf(tmp_path, capsys):
    path = _network_file(tmp_path, base_mva=1e308)
    rc, _, err = run(capsys, "opf", path)
    assert rc == 2
    assert err == f"Error: {path}: base_mva: expected a positive number of at most 1e+06 MVA, got 1e+308\n"


def test_a_network_number_above_1e9(tmp_path, capsys):
    d = network_to_dict(load_network("ieee14"))
    d["loads"][2]["pd_mw"] = 1e300
    path = tmp_path / "n.json"
    path.write_text(json.dumps(d))
    rc, _, err = run(capsys, "powerflow", path)
    assert rc == 2
    assert err == (f"Error: {path}: load 2 (id 3), pd_mw: value out of range (expected at most 1e+09 in "
                   "absolute value)\n")


def test_negative_rating_in_a_cdf_file(tmp_path, capsys):
    src = Path(__file__).parent / "data" / "ieee14cdf.txt"
    lines = src.read_text().splitlines(keepends=True)
    k = next(i for i, ln in enumerate(lines) if ln.startswith("BRANCH DATA FOLLOWS")) + 1
    lines[k] = lines[k][:50] + "  -50" + lines[k][55:]
    path = tmp_path / "neg.txt"
    path.write_text("".join(lines))
    rc, _, err = run(capsys, "powerflow", path)
    assert rc == 2
    assert err == (f"Error: {path}:{k + 1}: columns 51-55 (MVA rating 1): negative rating -50 (expected > 0, "
                   "or 0 for no thermal limit)\n")


# --- Parquet ----------------------------------------------------------------------------------

def test_zero_row_parquet_never_aborts_at_exit(split, tmp_path):
    """Reading a Parquet file with pyarrow's reader threads and exiting at once aborted now and
    then ("terminate called without an active exception", exit 134) in the threads' teardown:
    run validate many times in fresh processes, two at a time."""
    path = tmp_path / "zero.parquet"
    write_predictions(split, pg_mw=np.zeros((split.n_samples, len(split.gen_id))),
                      vm_pu=np.ones((split.n_samples, len(split.bus_id))), path=tmp_path / "p.parquet", model=MODEL)
    t = pq.read_table(tmp_path / "p.parquet")
    pq.write_table(t.slice(0, 0).replace_schema_metadata(t.schema.metadata), path)
    code = ("import sys\nfrom flowgauge.submission._predictions import read_predictions\n"
            "p, problems = read_predictions(sys.argv[1])\nsys.exit(2 if problems else 0)\n")
    codes: list[int] = []
    t0 = time.monotonic()
    while time.monotonic() - t0 < 15:
        procs = [subprocess.Popen([sys.executable, "-c", code, str(path)], stderr=subprocess.PIPE) for _ in range(2)]
        for p in procs:
            _, err = p.communicate(timeout=60)
            codes.append(p.returncode)
            assert p.returncode == 2, err.decode(errors="replace")
    assert len(codes) >= 10


def test_corrupt_parquet_message_is_one_line(split, tmp_path, capsys):
    path = tmp_path / "bad.parquet"
    write_predictions(split, pg_mw=np.zeros((split.n_samples, len(split.gen_id))),
                      vm_pu=np.ones((split.n_samples, len(split.bus_id))), path=tmp_path / "p.parquet", model=MODEL)
    data = (tmp_path / "p.parquet").read_bytes()
    path.write_bytes(data[:4] + data[4: len(data) // 2] + b"\0" * 100 + data[-8:])
    rc, _, err = run(capsys, "validate", path)
    assert rc == 2 and err.count("\n") == 1
    assert err.startswith(f"Error: {path}: not a readable Parquet file (")


# --- the console --------------------------------------------------------------------------------

def test_dir_lists_the_lazy_calls():
    assert {"load_split", "score", "write_predictions", "load_network"} <= set(dir(flowgauge))


def test_splits_help_does_not_cut_descriptions(capsys):
    with pytest.raises(SystemExit):
        from flowgauge.cli import cli
        cli.main(["splits", "--help"], prog_name="flowgauge")
    out = capsys.readouterr().out
    assert "..." not in out.split("Commands:")[1]
    assert "build    Build a split of a network (resumable)." in out


def test_baseline_format_has_help(capsys):
    assert main(["baseline", "--help"]) == 0
    assert "File format of the predictions written to --out" in capsys.readouterr().out


def test_safe_text_escapes_terminal_controls():
    assert safe_text("a\x1b]0;title\x07b\x1b[2J\ud800") == "a\\x1b]0;title\\x07b\\x1b[2J\\ud800"


_PIECES = st.text(st.characters(), min_size=1, max_size=20) | st.sampled_from(
    ["\x1b[2J", "\x1b]0;x\x07", "\x00", "\r", "\x7f", "\u202e", "[bold]", "[/]", "\ud800", "\x9b31m"])
_HOSTILE = st.lists(_PIECES, min_size=1, max_size=4).map("".join)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(name=_HOSTILE, author=_HOSTILE)
def test_hostile_names_reach_the_console_escaped(good_doc, tmp_path, capsys, name, author):
    doc = json.loads(json.dumps(good_doc))
    doc["model"]["name"], doc["model"]["authors"] = name, [author]
    path = tmp_path / "h.json"
    path.write_text(json.dumps(doc))  # json.dumps writes control characters and surrogates as escapes
    for args in (["validate", path], ["score", path, "--out", tmp_path / "s.json"]):
        rc, out, err = run(capsys, *args)
        assert rc in (0, 2), err
        text = out + err
        assert "Traceback" not in text
        bad = [c for c in text if (ord(c) < 32 and c != "\n") or 0x7f <= ord(c) < 0xa0 or 0xd800 <= ord(c) < 0xe000
               or c in "\u202e"]
        assert bad == [], repr(text)


@pytest.mark.parametrize("args", [["networks"], ["powerflow", "ieee14"], ["opf", "ieee14"], ["opf", "ieee14", "--dc"]])
def test_one_table_style_across_commands(args, capsys):
    assert main(args) == 0
    out = capsys.readouterr().out
    assert " ────" in out  # a rule under the header, no frame (rich SIMPLE_HEAD)
    assert not any(c in out for c in "┏┃│┡└")
