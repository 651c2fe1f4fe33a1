"""``flowgauge validate``: parse, call the library, print."""

from __future__ import annotations

from pathlib import Path

import click
from rich.markup import escape

from ..submission._format import DEFAULT_MAX_BYTES
from ._common import console

__all__ = ["validate"]


@click.command()
@click.argument("file", type=click.Path(path_type=Path))
@click.option("--split", "split_path", type=click.Path(path_type=Path), default=None,
              help="Split folder to check against (default: the known split with the hash in the file's header).")
@click.option("--max-bytes", type=click.IntRange(min=1), default=DEFAULT_MAX_BYTES, show_default=True,
              help="Refuse files larger than this many bytes (parsing JSON takes up to 26 times "
                   "the file size in memory; docs/submission.md).")
def validate(file: Path, split_path: Path | None, max_bytes: int) -> None:
    """Check a predictions file (JSON or Parquet) against its schema and its split.

    Exit 0 when valid; exit 2 with the errors (up to 20, then their count) on stderr.
    """
    from ..submission import check_predictions

    report = check_predictions(file, split_path, max_bytes=max_bytes)
    p = report.predictions
    fields = ", ".join(p.fields)
    console.print(
        f"[green]valid[/green] {escape(str(file))}: {p.n_samples} samples for "
        f"{escape(p.header['split']['network'])}/{escape(p.header['split']['split'])} "
        f"({p.format}; {fields}; model {escape(repr(p.header['model']['name']))}; "
        f"content hash {p.content_hash[:12]}...)", soft_wrap=True)
