"""``flowgauge rank`` end to end on a small board: two baselines on two tiny splits of the IEEE
14-bus system (PYPOWER's case14 data, bundled). Hashes are checked with hashlib, the CSV is
read back with pandas; the splits are built here, in a temporary folder."""

from __future__ import annotations

import hashlib
import json
import re
import shutil
from pathlib import Path

import pytest

from flowgauge.cli import main

SPLITS = ("test-id", "test-ood")
ENTRIES = ("nearest", "linear")
RULES = """format = "flowgauge-rules"
format_version = 1

[scope]
networks = "all"
splits = ["test-id", "test-ood"]

[[keys]]
metric = "restoration_failure_rate"
direction = "lower"

[[keys]]
metric = "restored_gap_pct_abs_mean"
direction = "lower"

[ties]
level = 0.95
resamples = 500
seed = 20261201
"""
TABLES = ("ranking.md", "ranking.csv", "ranking.tex", "index.html")


@pytest.fixture(scope="module")
def pristine(tmp_path_factory):
    """A board with scorecards and tables, built once; tests work on copies."""
    from flowgauge.baselines import write_baseline
    from flowgauge.splits import build_split

    root = tmp_path_factory.mktemp("board")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("FLOWGAUGE_SPLITS", str(root / "splits"))
        build_split("ieee14", "train", samples=30, seed=3, out=root / "splits/ieee14/train")
        for split in SPLITS:
            folder = root / "splits/ieee14" / split
            build_split("ieee14", split, samples=10, seed=3, out=folder)
            for name in ENTRIES:
                write_baseline(name, folder, root / f"lb/submissions/ieee14/{split}/{name}.json")
        (root / "lb/rules.toml").write_text(RULES)
        assert main(["rank", str(root / "lb")]) == 0
    return root


@pytest.fixture
def board(pristine, tmp_path, monkeypatch):
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(pristine / "splits"))
    shutil.copytree(pristine / "lb", tmp_path / "lb")
    return tmp_path / "lb"


def _tables(board: Path) -> dict[str, bytes]:
    return {name: (board / name).read_bytes() for name in TABLES}


def _seal_ok(data: bytes) -> bool:
    body, _, last = data.rstrip(b"\n").rpartition(b"\n")
    recorded = re.search(rb"content-sha256: ([0-9a-f]{64})", last).group(1).decode()
    return recorded == hashlib.sha256(body + b"\n").hexdigest()  # hashlib as the reference


def test_rank_writes_sealed_tables_and_same_bytes_again(board, capsys):
    before = _tables(board)
    assert all(_seal_ok(data) for data in before.values())
    assert main(["rank", str(board)]) == 0
    out = capsys.readouterr().out
    assert "rescored" not in out  # scorecards are fresh: nothing is scored again
    assert _tables(board) == before
    assert re.search(r"ieee14: 2 ranked over test-id, test-ood\n +1  baseline ", out)


def test_tables_record_every_hash(board):
    import pandas as pd
    md = (board / "ranking.md").read_text()
    df = pd.read_csv(board / "ranking.csv", comment="#")  # pandas as an outside CSV reader
    rules_hash = hashlib.sha256((board / "rules.toml").read_bytes()).hexdigest()
    assert set(df.rules_sha256) == {rules_hash} and rules_hash in md
    for card_path in sorted((board / "scorecards").rglob("*.json")):
        card = json.loads(card_path.read_text())
        for digest in (card["scorecard_hash"], card["predictions_hash"],
                       card["split"]["split_hash"]):
            assert digest in md
            assert digest in (board / "ranking.tex").read_text()
            assert digest in (board / "index.html").read_text()
    overall = df[df.scope == "all"]
    # the order follows the scorecards' mean failure rate over the two splits (read with json)
    rate = {}
    for name in ENTRIES:
        cards = [json.loads((board / f"scorecards/ieee14/{s}/{name}.json").read_text())
                 for s in SPLITS]
        rate[f"baseline {name}"] = sum(c["aggregates"]["restoration_failure_rate"]
                                       for c in cards) / 2
    assert overall.entry.tolist() == sorted(rate, key=lambda n: (rate[n], n)) or \
        rate[overall.entry.iloc[0]] == rate[overall.entry.iloc[1]]
    assert overall.restoration_failure_rate.tolist() == pytest.approx(
        [rate[n] for n in overall.entry], abs=1e-9)


def test_verify_passes_then_catches_one_changed_number(board, capsys):
    assert main(["rank", "--verify", str(board)]) == 0
    assert "every table matches" in capsys.readouterr().out
    sub = board / "submissions/ieee14/test-id/linear.json"
    text = sub.read_text()
    first = re.search(r'"pg_mw":\[([-0-9.e]+)', text).group(1)
    sub.write_text(text.replace(first, str(float(first) + 1.0), 1))
    before = _tables(board)
    assert main(["rank", "--verify", str(board)]) == 3
    err = capsys.readouterr().err
    assert re.search(r"Error: scorecards/ieee14/test-id/linear.json: scorecard of "
                     r"submissions/ieee14/test-id/linear.json does not match it: its "
                     r"predictions_hash [0-9a-f]{12} differs from the current [0-9a-f]{12}\n", err)
    assert _tables(board) == before  # --verify writes nothing


def test_verify_catches_an_edited_table(board, capsys):
    md = board / "ranking.md"
    md.write_bytes(md.read_bytes().replace(b"baseline", b"Baseline", 1))
    assert main(["rank", "--verify", str(board)]) == 3
    assert re.search(r"Error: ranking.md: records content hash [0-9a-f]{12}, its content hashes to [0-9a-f]{12}\n",
                     capsys.readouterr().err)
    # resealed by hand: the seal is right, but the bytes are not those rebuilt from raw files
    body = md.read_bytes().rstrip(b"\n").rpartition(b"\n")[0] + b"\n"
    md.write_bytes(body + f"content-sha256: {hashlib.sha256(body).hexdigest()}\n".encode())
    assert main(["rank", "--verify", str(board)]) == 3
    assert "Error: ranking.md: bytes differ from the table regenerated from the raw files (first " \
           "at line" in capsys.readouterr().err


def test_verify_catches_a_rehashed_scorecard(board, capsys):
    from flowgauge.scoring import scorecard_hash
    path = board / "scorecards/ieee14/test-ood/nearest.json"
    card = json.loads(path.read_text())
    card["aggregates"]["restoration_failure_rate"] = 0.0
    card["scorecard_hash"] = scorecard_hash(card)
    path.write_text(json.dumps(card))
    assert main(["rank", "--verify", str(board)]) == 3
    assert re.search(r"Error: scorecards/ieee14/test-ood/nearest.json: rescoring "
                     r"submissions/ieee14/test-ood/nearest.json gives scorecard hash [0-9a-f]{12}, "
                     r"the committed scorecard records [0-9a-f]{12}\n", capsys.readouterr().err)


def test_rank_rescores_missing_and_stale_scorecards(board, capsys):
    from flowgauge.scoring import scorecard_hash
    before = _tables(board)
    (board / "scorecards/ieee14/test-id/nearest.json").unlink()
    path = board / "scorecards/ieee14/test-ood/linear.json"
    card = json.loads(path.read_text())
    card["flowgauge_version"] = "0.0.9"
    card["scorecard_hash"] = scorecard_hash(card)
    path.write_text(json.dumps(card))
    (board / "scorecards/ieee14/test-ood/nearest.json").write_text("not json")
    assert main(["rank", "--verify", str(board)]) == 3
    assert "Error: scorecards/ieee14/test-id/nearest.json: scorecard of " \
           "submissions/ieee14/test-id/nearest.json does not match it: it is missing" \
        in capsys.readouterr().err
    assert main(["rank", str(board)]) == 0
    out = capsys.readouterr().out
    assert ("rescored 3 submission(s):\n  scorecards/ieee14/test-id/nearest.json\n"
            "  scorecards/ieee14/test-ood/linear.json\n  scorecards/ieee14/test-ood/nearest.json\n"
            ) in out
    assert _tables(board) == before


def test_external_submission_listed_by_path_and_hash(board, tmp_path, capsys):
    from flowgauge.submission import load_predictions
    src = board / "submissions/ieee14/test-ood/linear.json"
    far = tmp_path / "elsewhere" / "linear-ood.json"
    far.parent.mkdir()
    shutil.move(src, far)
    digest = load_predictions(far).content_hash
    listing = board / "submissions/external.toml"
    listing.write_text(f'[[submission]]\npath = "{far}"\npredictions_hash = "{digest}"\n')
    assert main(["rank", str(board)]) == 0
    assert "scorecards/external/linear-ood.json" in capsys.readouterr().out
    assert str(far) in (board / "ranking.md").read_text()
    assert main(["rank", "--verify", str(board)]) == 0
    capsys.readouterr()
    # the file is gone: rank ranks from its scorecard, --verify needs the file
    far.unlink()
    assert main(["rank", str(board)]) == 0
    capsys.readouterr()
    assert main(["rank", "--verify", str(board)]) == 2
    assert (f"Error: {far}: listed in submissions/external.toml but not found; --verify "
            "rescores every submission and needs the file") in capsys.readouterr().err
    # a listed hash that does not match the scorecard
    listing.write_text(f'[[submission]]\npath = "{far}"\npredictions_hash = "{"0" * 64}"\n')
    assert main(["rank", str(board)]) == 3
    assert re.search(r"Error: scorecards/external/linear-ood.json: scorecard records "
                     r"predictions_hash [0-9a-f]{12}, external.toml lists 0{12}\n",
                     capsys.readouterr().err)


def test_published_commitment_is_checked(board, pristine, capsys):
    from flowgauge.splits import publish_split
    publish_split(pristine / "splits/ieee14/test-id", board / "published/ieee14-test-id")
    rules = board / "rules.toml"
    rules.write_text(RULES + '\n[published]\nsplits = ["published/ieee14-test-id"]\n')
    assert main(["rank", str(board)]) == 0
    out = capsys.readouterr().out
    assert max(len(line) for line in out.splitlines()) <= 80  # the note wraps at 80 columns
    assert re.search(r"note: ieee14/test-id: the references used match the commitment published "
                     r"in published/ieee14-test-id \([0-9a-f]{12}\)", re.sub(r" *\n", " ", out))
    assert "the references used match the commitment" in (board / "index.html").read_text()
    manifest = board / "published/ieee14-test-id/manifest.json"
    doc = json.loads(manifest.read_text())
    doc["files"]["references"]["hash"] = "f" * 64
    manifest.write_text(json.dumps(doc))
    assert main(["rank", str(board)]) == 3
    assert re.search(r"Error: published/ieee14-test-id: the references of ieee14/test-id used for "
                     r"scoring \(hash [0-9a-f]{12}\) differ from the published commitment f{12}\n",
                     capsys.readouterr().err)


@pytest.mark.parametrize("change, code, message", [
    (lambda b: (b / "rules.toml").unlink(), 2,
     "rules.toml: no rules file here; a leaderboard folder needs rules.toml"),
    (lambda b: (b / "submissions/external.toml").write_text('[[submission]]\npath = "x.csv"\n'), 2,
     "submissions/external.toml: submission[0]: path must name a .json or .parquet file"),
    (lambda b: shutil.copy(b / "submissions/ieee14/test-id/linear.json",
                           b / "submissions/ieee14/test-id/linear-copy.json"), 2,
     "submissions/ieee14/test-id/linear.json: entry 'baseline linear' already has a "
     "ieee14/test-id submission (submissions/ieee14/test-id/linear-copy.json); one submission "
     "per entry and split"),
])
def test_bad_input_is_one_message(board, capsys, change, code, message):
    change(board)
    before = _tables(board)
    assert main(["rank", str(board)]) == code
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err and err.count("\n") == 1
    assert _tables(board) == before  # nothing half-written


def test_missing_split_names_the_submission(board, tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(tmp_path / "no-splits"))
    assert main(["rank", str(board)]) == 2
    err = capsys.readouterr().err
    assert re.match(r"Error: submissions/ieee14/test-id/linear.json: its split ieee14/test-id is "
                    r"not among the frozen splits \(no split with this split_hash under .*no-splits\)",
                    err), err


def test_a_split_no_entry_of_the_network_has_is_left_out_of_its_overall_table(board):
    # The rules name test-edge too, but this network's entries have no test-edge (as a network
    # without hourly loads has no test-year): the overall table ranks over the splits the
    # network has, not "no submission for test-edge" for every entry. Read back with pandas.
    import pandas as pd
    (board / "rules.toml").write_text(RULES.replace('splits = ["test-id", "test-ood"]',
                                                    'splits = ["test-id", "test-ood", "test-edge"]'))
    assert main(["rank", str(board)]) == 0
    table = pd.read_csv(board / "ranking.csv")
    overall = table[(table["network"] == "ieee14") & (table["scope"] == "all")]
    assert len(overall) == len(ENTRIES)
    assert overall["rank"].notna().all()
    assert all("test-id" in s and "test-edge" not in s for s in overall["splits"])
