"""``flowgauge validate``: parse, call the library, print."""

from __future__ import annotations

from pathlib import Path

import click
from ..submission._format import DEFAULT_MAX_BYTES
from ._common import console, short_hash, shown

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
    split = p.header["split"]
    console.print(f"[green]valid[/green] {shown(file, 120)}: {p.n_samples:,} samples for "
                  f"{shown(split['network'], 30)}/{shown(split['split'], 20)} ({p.format})", soft_wrap=True)
    console.print(f"  model {shown(repr(p.header['model']['name']), 40)}; fields {', '.join(p.fields)}")
    console.print(f"  content hash {short_hash(p.content_hash)}")
