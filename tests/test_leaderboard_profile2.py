"""Board rules of scoring profile 2: ranking by the solved share with per-split keys, entries
that used more than the training split, and boards that would mix two scoring profiles."""

import json
from pathlib import Path


from flowgauge.cli import main
from flowgauge.scoring import score

ROOT = Path(__file__).resolve().parents[1]


def _baseline_json(name: str, folder: Path) -> Path:
    """A baseline's predictions for the frozen ieee14 test-id split, as JSON."""
    from flowgauge.baselines import write_baseline
    from flowgauge.splits import load_split
    out = folder / f"{name}.json"
    if not out.exists():
        folder.mkdir(parents=True, exist_ok=True)
        write_baseline(name, load_split("ieee14", "test-id"), out, train=load_split("ieee14", "train"))
    return out

RULES = """format = "flowgauge-rules"
format_version = 1
[scope]
networks = "all"
splits = ["test-id"]
[[keys]]
metric = "solved_share"
direction = "higher"
[[keys]]
metric = "severity_mean"
direction = "lower"
[split_keys]
test-id = [{ metric = "severity_mean", direction = "lower" }]
[ties]
level = 0.95
resamples = 200
seed = 1
[scoring]
profile = "reactive-limits"
"""


def _board(tmp_path, rules=RULES, extra_data=("nearest",)):
    board = tmp_path / "board"
    (board / "submissions").mkdir(parents=True)
    (board / "rules.toml").write_text(rules)
    for name in ("linear", "nearest"):
        doc = json.loads(_baseline_json(name, tmp_path / "made").read_text())
        doc["model"]["training_data_only"] = name not in extra_data
        (board / "submissions" / f"{name}.json").write_text(json.dumps(doc))
    return board


def test_an_entry_that_used_more_data_is_shown_but_not_ranked(tmp_path, capsys):
    board = _board(tmp_path)
    assert main(["rank", str(board)]) == 0
    md = (board / "ranking.md").read_text()
    assert "Not ranked here: baseline nearest (declares it used more than the training split" in md
    assert "| 1 | baseline linear |" in md
    html = (board / "index.html").read_text()
    assert "Declares it used the training split only: no (not ranked unless rules.toml allows it)" in html
    # allowed by the rules: ranked
    board2 = _board(tmp_path / "allowed", rules=RULES + "[entries]\nallow_extra_data = true\n")
    assert main(["rank", str(board2)]) == 0
    assert "Not ranked here" not in (board2 / "ranking.md").read_text()


def test_split_keys_order_that_split_by_severity(tmp_path):
    board = _board(tmp_path, extra_data=())
    assert main(["rank", str(board)]) == 0
    md = (board / "ranking.md").read_text()
    # the overall table reads the solved share first; the test-id table its own key only
    assert "| Rank | Entry | solved share | mean severity |" in md
    assert "| Rank | Entry | mean severity | Difference" in md
    assert "The table of split test-id orders by severity_mean (lower is better)." in md


def test_scorecards_of_two_profiles_are_not_ranked_together(tmp_path, capsys):
    board = _board(tmp_path, extra_data=())
    # a listed submission whose file is absent is ranked from its committed scorecard: one made
    # with the strict profile cannot join a reactive-limits board
    src = _baseline_json("dc-opf", tmp_path / "made")
    card = score(src, profile="strict")
    listed = {"path": "elsewhere/dc-opf.json", "predictions_hash": card.header["predictions_hash"]}
    (board / "submissions" / "external.toml").write_text(
        f'[[submission]]\npath = "{listed["path"]}"\npredictions_hash = "{listed["predictions_hash"]}"\n')
    card.write(board / "scorecards" / "external" / "dc-opf.json")
    before = sorted(p.name for p in board.iterdir())
    assert main(["rank", str(board)]) == 2
    err = capsys.readouterr().err
    assert "scorecards of two profiles cannot be ranked together" in err
    assert "'default' version 1" in err and "'reactive-limits' version 2" in err
    assert sorted(p.name for p in board.iterdir()) == before  # nothing written
