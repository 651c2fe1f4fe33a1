"""Small pieces shared by the command modules: consoles, JSON output, and the one table style
and number formats every command prints with."""

from __future__ import annotations

import math
import sys
from typing import Any

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from .._io import canonical_json, clip_text, safe_text

__all__ = ["console", "err_console", "echo_json", "shown", "table", "fmt_num", "fmt_pct", "short_hash",
           "SHORT_HASH"]

SHORT_HASH = 12  # hex digits of a hash shown on screen; files keep all 64

console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)


def echo_json(obj: Any) -> None:
    """Print ``obj`` as indented canonical JSON on stdout (for ``--json`` options)."""
    sys.stdout.write(canonical_json(obj, indent=1).decode("utf-8"))
    sys.stdout.flush()


def shown(text: Any, limit: int = 80) -> str:
    """Text from a file or a submitter, ready for rich: control characters escaped, cut to
    ``limit`` characters, markup escaped (a name "[bold]" prints as written)."""
    return escape(clip_text(safe_text(str(text)), limit))


def table(title: str | None = None, caption: str | None = None) -> Table:
    """The table style of every command: a rule under the bold header, no outer frame."""
    return Table(title=title, caption=caption, box=box.SIMPLE_HEAD, header_style="bold",
                 title_justify="left", caption_justify="left", pad_edge=False)


def fmt_num(x: Any, decimals: int = 2) -> str:
    """A measured number with a fixed number of decimals for its quantity (2 for MW, MVAr,
    degrees and percentages, 4 for per-unit values) and thousands separators; scientific
    notation only when the value would show as zero; "-" for none."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    x = float(x)
    if x != 0 and abs(x) < 0.5 * 10.0 ** -decimals:
        return f"{x:.1e}"
    return f"{x:,.{decimals}f}"


def fmt_pct(share: Any) -> str:
    """A share (0..1) as a percentage with one decimal: 0.964 -> "96.4%"; "-" for none."""
    if share is None or (isinstance(share, float) and math.isnan(share)):
        return "-"
    return f"{100 * float(share):.1f}%"


def short_hash(digest: str) -> str:
    """The first :data:`SHORT_HASH` hex digits of a hash, for the screen."""
    return digest[:SHORT_HASH]
