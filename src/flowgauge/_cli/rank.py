"""``flowgauge rank [DIR]``: rebuild the ranking tables and page, or verify them."""

from __future__ import annotations

from pathlib import Path

import click

__all__ = ["rank"]


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
    ranking.md, ranking.csv, ranking.tex and index.html.
    """
    from rich.markup import escape

    from ..leaderboard import build_board
    from ._common import console

    def say(text: str) -> None:
        console.print(text, soft_wrap=True)

    report = build_board(board, verify=verify, workers=workers)
    for table in report.tables:
        if table.scope == "all":
            order = ", ".join(f"{s.rank}. {s.entry}" for s in table.standings)
            say(f"[bold]{escape(table.network)}[/bold]: {escape(order or 'no complete entry')}")
    for note in report.notes:
        say(f"note: {escape(note)}")
    if report.rescored:
        say(f"rescored {len(report.rescored)} submission(s): {escape(', '.join(report.rescored))}")
    verb = "verified" if verify else "wrote"
    for name, digest in report.outputs.items():
        say(f"{verb} {escape((board / name).as_posix())}  content-sha256 {digest}")
    if verify:
        say(f"all {len(report.records)} submissions rescore to their recorded scorecards; "
            "every table matches the one rebuilt from the raw files")
