"""``flowgauge rank [DIR]``: rebuild the ranking tables and page, or verify them."""

from __future__ import annotations

from pathlib import Path

import click

__all__ = ["rank", "print_report"]

_NAME_CAP = 48  # characters of an entry name on screen, so that a standing fits 80 columns


@click.command("rank")
@click.argument("board", required=False, default="leaderboard",
                type=click.Path(file_okay=False, path_type=Path))
@click.option("--verify", is_flag=True,
              help="Write nothing: rescore every submission and check every recorded hash and "
                   "the bytes of every table (exit 3 on any difference).")
@click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True,
              help="Processes for the restoration power flows when rescoring.")
def rank(board: Path, verify: bool, workers: int) -> None:
    """Rebuild (or verify) the ranking tables and leaderboard page of BOARD (default: leaderboard/).

    Rescores a submission whose scorecard is missing or stale, ranks by rules.toml and writes
    the new scorecards, ranking.md, ranking.csv, ranking.tex and index.html, all or none.
    """
    from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                               TimeElapsedColumn)

    from ..errors import FlowgaugeError
    from ..leaderboard import build_board
    from ._common import console, err_console

    bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), console=err_console, transient=True,
                   disable=not err_console.is_terminal)
    task = bar.add_task("verifying" if verify else "ranking", total=None)

    def step(what: str, done: int, total: int) -> None:
        from ..leaderboard._text import terminal
        verb = "checking" if verify else "reading"
        bar.update(task, description=f"{verb} {terminal(what, 40)}", completed=done, total=total,
                   refresh=True)

    try:
        with bar:
            report = build_board(board, verify=verify, workers=workers, progress=step)
    except FlowgaugeError as exc:  # its text may quote a submitter's: one safe, short line
        raise _for_screen(exc) from None
    print_report(report, board, console)


def _for_screen(exc):
    from ..leaderboard._text import clean, short_hashes
    where = None if exc.where is None else short_hashes(clean(exc.where, 200))
    return type(exc)(clean(short_hashes(str(exc.message)), 400), where=where)


def print_report(report, board: Path, console) -> None:
    """What ``rank`` found and did, for people: one line per ranked entry, entries left out,
    notes, rescored scorecards and the tables written; submitters' text made safe (one line,
    capped, no control characters, no rich markup) and hashes cut to 12 digits."""
    from ..leaderboard._text import short_hashes, terminal

    def say(text: str) -> None:
        console.print(text, soft_wrap=False, overflow="fold", crop=False)

    for table in report.tables:
        if table.scope != "all":
            continue
        say(f"[bold]{terminal(table.network, 40)}[/bold]: {len(table.standings)} ranked over "
            f"{terminal(', '.join(table.splits), 60)}")
        for s in table.standings:
            say(f"  {s.rank:>3}  {terminal(s.entry, _NAME_CAP)}{'  (tied)' if s.tied else ''}")
        for entry, why in table.unranked:
            say(f"  not ranked: {terminal(entry, _NAME_CAP)} ({terminal(why, 200)})")
    for note in report.notes:
        say(f"note: {terminal(short_hashes(note), 300)}")
    if report.rescored:
        say(f"rescored {len(report.rescored)} submission(s):")
        for path in report.rescored:
            say(f"  {terminal(path, 200)}")
    say(f"{'verified in' if report.verified else 'wrote to'} {terminal(board.as_posix(), 300)}:")
    for name, digest in report.outputs.items():
        say(f"  {name:<12} content-sha256 {digest[:12]}")
    if report.verified:
        say(f"all {len(report.records)} submissions rescore to their recorded scorecards; "
            "every table matches the one rebuilt from the raw files")
