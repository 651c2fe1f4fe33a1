"""``flowgauge networks [--json]``: the bundled networks, one row each."""

from __future__ import annotations

import click
from rich import box
from rich.table import Table

from ..network import bundled_names, load_network
from ._common import console, echo_json

__all__ = ["networks"]

# table header -> key of the summary
_COLUMNS = {"name": "name", "buses": "buses", "branches": "branches", "generators": "generators",
            "loads": "loads", "load MW": "total_load_mw", "source": "source"}


def _summary(name: str) -> dict:
    net = load_network(name)
    return {"name": name, "buses": net.n_bus, "branches": net.n_branch, "generators": net.n_gen,
            "loads": net.n_load, "total_load_mw": net.total_load_mw(), "title": net.provenance.get("title", ""),
            "source": net.provenance.get("source", "")}


@click.command("networks")
@click.option("--json", "as_json", is_flag=True, help="Print a JSON list of objects instead of a table.")
def networks(as_json: bool) -> None:
    """List the bundled networks: size, total load and source."""
    rows = [_summary(name) for name in bundled_names()]
    if as_json:
        echo_json(rows)
        return
    table = Table(title="Bundled networks", box=box.SIMPLE_HEAD)
    for header, key in _COLUMNS.items():
        if key == "source":
            table.add_column(header, ratio=1, overflow="fold")
        else:
            table.add_column(header, justify="left" if key == "name" else "right", no_wrap=True)
    for r in rows:
        table.add_row(*(f"{r[k]:.1f}" if k == "total_load_mw" else str(r[k]) for k in _COLUMNS.values()))
    console.print(table)
