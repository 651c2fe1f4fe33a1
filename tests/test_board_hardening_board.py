"""``flowgauge rank`` on a small real board (two baselines on two tiny ieee14 splits, built in
test_leaderboard_board's fixture): writes are one set, reads and writes stay inside the board,
rules.toml is a regular file, and the console is short, safe and shows progress."""

from __future__ import annotations

import errno
import io
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from rich.console import Console

from flowgauge.cli import main
from test_board_hardening import CONTROL, HOSTILE_AUTHOR, HOSTILE_LINK, check_page
from test_leaderboard_board import board, pristine  # noqa: F401 (fixtures)


def _snapshot(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes()
            for p in sorted(root.rglob("*")) if p.is_file() and not p.is_symlink()}


def _one_line_error(capsys, code_text: str) -> str:
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    assert code_text in err, err
    return err


def test_full_disk_midway_changes_nothing(board, capsys, monkeypatch):
    (board / "scorecards/ieee14/test-id/linear.json").unlink()  # to be rescored and written
    before = _snapshot(board)
    calls = []
    real_fsync = os.fsync

    def fsync(fd):
        calls.append(fd)
        if len(calls) == 4:  # the fourth file of the set: the disk is full
            raise OSError(errno.ENOSPC, "No space left on device")
        real_fsync(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    assert main(["rank", str(board)]) == 2
    _one_line_error(capsys, f"Error: {board}: cannot write the board (No space left on device); "
                            "nothing was changed")
    assert _snapshot(board) == before
    assert not [p for p in board.iterdir() if p.name.startswith(".")]  # no staging left behind


def test_read_only_board_is_one_line(board, capsys, monkeypatch):
    import tempfile
    before = _snapshot(board)

    def refuse(*args, **kwargs):
        raise OSError(errno.EROFS, "Read-only file system")

    monkeypatch.setattr(tempfile, "mkdtemp", refuse)
    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    assert main(["rank", str(board)]) == 2
    _one_line_error(capsys, "cannot write the board (Read-only file system); nothing was changed")
    assert _snapshot(board) == before


def test_failed_rank_writes_no_scorecard(board, capsys):
    (board / "scorecards/ieee14/test-id/linear.json").unlink()
    shutil.copy(board / "submissions/ieee14/test-id/linear.json",
                board / "submissions/ieee14/test-id/linear-copy.json")
    before = _snapshot(board)
    assert main(["rank", str(board)]) == 2
    _one_line_error(capsys, "one submission per entry and split")
    assert _snapshot(board) == before  # neither the missing scorecard nor the copy's


def test_scorecard_folder_linked_outside_is_refused(board, tmp_path, capsys):
    outside = tmp_path / "outside"
    shutil.move(board / "scorecards/ieee14", outside)
    (board / "scorecards/ieee14").symlink_to(outside, target_is_directory=True)
    (outside / "test-id/linear.json").unlink()
    before = _snapshot(outside)
    assert main(["rank", str(board)]) == 2
    _one_line_error(capsys, "leads outside the board folder")
    assert _snapshot(outside) == before  # nothing written there


def test_submission_linked_to_a_file_outside_is_refused(board, tmp_path, capsys):
    sub = board / "submissions/ieee14/test-id/linear.json"
    far = tmp_path / "far.json"
    shutil.move(sub, far)
    sub.symlink_to(far)
    before = _snapshot(board)
    assert main(["rank", str(board)]) == 2
    err = _one_line_error(capsys, "Error: submissions/ieee14/test-id/linear.json: leads outside "
                                  "the board folder")
    assert str(far) in err
    assert _snapshot(board) == before


@pytest.mark.parametrize("make, kind", [
    (lambda p: p.mkdir(), "a folder"),
    (lambda p: p.symlink_to("/dev/zero"), "a character device"),
])
def test_rules_file_that_is_not_a_file(board, capsys, make, kind):
    (board / "rules.toml").unlink()
    make(board / "rules.toml")
    assert main(["rank", str(board)]) == 2
    _one_line_error(capsys, f"rules.toml: is {kind}; expected a rules file in TOML (a regular file)")


def test_rules_file_that_is_a_fifo_does_not_hang(board):
    (board / "rules.toml").unlink()
    os.mkfifo(board / "rules.toml")
    # a child process, so that a hang fails the test (timeout) instead of blocking the suite
    run = subprocess.run([sys.executable, "-c", "from flowgauge.cli import run; run()", "rank",
                          str(board)], capture_output=True, text=True, timeout=60,
                         env={**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)})
    assert run.returncode == 2
    assert run.stderr == (f"Error: {board / 'rules.toml'}: is a FIFO (named pipe); expected a "
                          "rules file in TOML (a regular file)\n")


def test_console_names_entries_missing_splits(board, capsys):
    (board / "submissions/ieee14/test-ood/linear.json").unlink()
    assert main(["rank", str(board)]) == 0
    out = capsys.readouterr().out
    assert "  not ranked: baseline linear (no submission for test-ood)\n" in out
    assert max(len(line) for line in out.splitlines()) <= 80


def test_verify_shows_progress(board, capsys, monkeypatch):
    from flowgauge._cli import _common
    screen = io.StringIO()
    monkeypatch.setattr(_common, "err_console",
                        Console(file=screen, force_terminal=True, width=80))
    assert main(["rank", "--verify", str(board)]) == 0
    shown = screen.getvalue()
    assert "checking submissions/ieee14/test-id/linear.json" in shown
    assert "checking split ieee14/test-" in shown


def test_hostile_submission_end_to_end(board, capsys):
    name = "<script>window.__pwned=1</script>\x1b]0;t\x07\x1b[2J `x` | #2"
    src = board / "submissions/ieee14/test-id/linear.json"
    doc = json.loads(src.read_text())
    doc["model"].update(name=name, authors=[HOSTILE_AUTHOR])
    doc["model"]["link"] = "https://example.org/ok"
    hostile = board / "submissions/ieee14/test-id/<img src=x onerror=alert(1)>`\n#x.json"
    hostile.write_text(json.dumps(doc))
    src.unlink()
    assert main(["rank", str(board)]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and not CONTROL.search(out.replace("\n", ""))
    assert max(len(line) for line in out.splitlines()) <= 80
    check_page((board / "index.html").read_text())
    tex = (board / "ranking.tex").read_text()
    assert all(line.startswith("%") or "#x.json" not in line for line in tex.splitlines())
    assert "\\textless{}img src=x onerror=alert(1)\\textgreater{}` \\#x.json" in tex
    # the link pattern of the predictions schema refuses an attribute break-out
    doc["model"]["link"] = HOSTILE_LINK
    hostile.write_text(json.dumps(doc))
    assert main(["rank", str(board)]) == 2
    _one_line_error(capsys, "/model/link")
