"""``flowgauge score`` through the CLI: a good run, and bad input (one clear message, exit 2,
no scorecard written)."""

import json
import re

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from flowgauge.cli import main
from flowgauge.scoring import read_scorecard

from test_scoring_support import split, split_path, write_reference


@pytest.fixture(scope="module")
def good(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    return write_reference(split("ieee14", "test-id"), folder / "ref.json"), split_path("ieee14", "test-id")


def test_score_writes_scorecard_and_per_sample(good, tmp_path, capsys):
    path, folder = good
    out, table = tmp_path / "card.json", tmp_path / "rows.parquet"
    rc = main(["score", str(path), "--split", str(folder), "--out", str(out), "--per-sample", str(table),
               "--workers", "1"])
    text = capsys.readouterr().out
    assert rc == 0
    assert "restoration failure rate" in text and "0.0%" in text
    doc = read_scorecard(out)
    assert re.search(r"\(hash " + doc["scorecard_hash"][:12] + r"\)", text)
    rows = pd.read_parquet(table)
    assert len(rows) == 20 and rows["sample_id"].tolist() == doc["per_sample"]["sample_id"]


def test_default_scorecard_path(good, tmp_path, capsys):
    path, folder = good
    local = tmp_path / "mine.json"
    local.write_bytes(path.read_bytes())
    assert main(["score", str(local), "--split", str(folder)]) == 0
    assert (tmp_path / "mine.scorecard.json").exists()


def _mutated(path, tmp_path, change):
    doc = json.loads(path.read_text())
    change(doc)
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(doc))
    return bad


@pytest.mark.parametrize("change, message", [
    (lambda d: d["samples"][0]["pg_mw"].pop(), r"/samples/0/pg_mw.*(length|items|5)"),
    (lambda d: d["samples"].pop(), r"sample"),
    (lambda d: d["samples"][1].__setitem__("vm_pu", [-1.0] * 14), r"/samples/1/vm_pu"),
    (lambda d: d["samples"][2]["pg_mw"].__setitem__(0, "12"), r"/samples/2/pg_mw/0"),
    (lambda d: d.__setitem__("format_version", 7), r"format_version"),
    (lambda d: d["samples"][3]["pg_mw"].__setitem__(1, float("nan")), r"NaN"),
    (lambda d: d["samples"].append(dict(d["samples"][0])), r"sample_id"),
])
def test_bad_predictions_exit_2_without_scorecard(good, tmp_path, capsys, change, message):
    path, folder = good
    bad = _mutated(path, tmp_path, change)
    out = tmp_path / "card.json"
    rc = main(["score", str(bad), "--split", str(folder), "--out", str(out)])
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith("Error: ") and re.search(message, err)
    assert "Traceback" not in err
    assert not out.exists() and not list(tmp_path.glob(".card.json*"))


def test_not_json_and_missing_file(good, tmp_path, capsys):
    _, folder = good
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": "flowgauge-predictions", "samp')  # truncated
    assert main(["score", str(bad), "--split", str(folder), "--out", str(tmp_path / "c.json")]) == 2
    assert "bad.json" in capsys.readouterr().err
    assert main(["score", str(tmp_path / "none.json"), "--split", str(folder)]) == 2
    assert "none.json" in capsys.readouterr().err
    assert not (tmp_path / "c.json").exists()


def test_unknown_split_hash(good, tmp_path, capsys, monkeypatch):
    path, _ = good
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(tmp_path / "no-splits-here"))
    bad = _mutated(path, tmp_path, lambda d: d["split"].__setitem__("split_hash", "0" * 64))
    assert main(["score", str(bad), "--out", str(tmp_path / "c.json")]) == 2
    assert re.search(r"unknown split hash 0{64}", capsys.readouterr().err)
    assert not (tmp_path / "c.json").exists()


def test_bad_workers_option(good, capsys):
    path, folder = good
    assert main(["score", str(path), "--split", str(folder), "--workers", "0"]) == 2
    assert "Invalid value for '--workers': 0 is not in the range x>=1." in capsys.readouterr().err


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_random_mutations_never_show_a_traceback(good, tmp_path, capsys, data):
    path, folder = good
    raw = bytearray(path.read_bytes())
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(raw) - 1))
        raw[i] = data.draw(st.sampled_from(b'0123456789.-e,:[]{}"x '))
    bad = tmp_path / "mutant.json"
    bad.write_bytes(bytes(raw))
    out = tmp_path / "mutant.card.json"
    out.unlink(missing_ok=True)
    rc = main(["score", str(bad), "--split", str(folder), "--out", str(out)])
    err = capsys.readouterr().err
    assert rc in (0, 2), err
    assert "Traceback" not in err
    assert out.exists() == (rc == 0)


def test_unwritable_destination(good, tmp_path, capsys):
    path, folder = good
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    assert main(["score", str(path), "--split", str(folder), "--out", str(blocker / "card.json")]) == 2
    assert re.search(r"a-file/card.json: cannot write here", capsys.readouterr().err)
    # a failed per-sample write leaves no scorecard either
    out = tmp_path / "card.json"
    assert main(["score", str(path), "--split", str(folder), "--out", str(out),
                 "--per-sample", str(blocker / "rows.parquet")]) == 2
    assert "cannot write here" in capsys.readouterr().err
    assert not out.exists()
