"""Write ieee14cdf.txt and ieee14cdf_side.json (this folder) from PYPOWER's case14.

PYPOWER's case14 says it was converted from the IEEE Common Data Format file ieee14cdf.txt
(title card kept in its docstring). No package registry reachable here ships that text file,
so this script writes the same data back in the IEEE Common Data Format column layout; see
ieee14cdf.README.md. Run: python tests/data/make_ieee14cdf.py
"""

from __future__ import annotations

import importlib.metadata
import json
from pathlib import Path

from pypower.api import case14

HERE = Path(__file__).resolve().parent
TITLE = " 08/19/93 UW ARCHIVE           100.0  1962 W IEEE 14 Bus Test Case"  # from case14's docstring


def num(v: float) -> str:
    return repr(float(v))


def card(fields: list[tuple[int, int, str, str]]) -> str:
    """One line: (first column, last column, text, 'l' or 'r' justified), 1-based inclusive."""
    line = [" "] * 127
    for first, last, text, just in fields:
        width = last - first + 1
        if len(text) > width:
            raise SystemExit(f"{text!r} does not fit columns {first}-{last}")
        text = text.ljust(width) if just == "l" else text.rjust(width)
        line[first - 1:last] = text
    return "".join(line).rstrip()


def bus_cards(ppc: dict) -> list[str]:
    gens = {int(g[0]): g for g in ppc["gen"]}
    base = ppc["baseMVA"]
    out = []
    for b in ppc["bus"]:
        i = int(b[0])
        g = gens.get(i)
        pg, qg, qmax, qmin, vg = (g[1], g[2], g[3], g[4], g[5]) if g is not None else (0, 0, 0, 0, 0)
        out.append(card([
            (1, 4, str(i), "r"), (6, 17, f"Bus {i}", "l"), (19, 20, str(int(b[6])), "r"),
            (21, 23, str(int(b[10])), "r"), (25, 26, str(int(b[1])), "r"), (28, 33, num(b[7]), "l"),
            (34, 40, num(b[8]), "r"), (41, 49, num(b[2]), "r"), (50, 59, num(b[3]), "r"),
            (60, 67, num(pg), "r"), (68, 75, num(qg), "r"), (77, 83, num(b[9]), "r"), (85, 90, num(vg), "r"),
            (91, 98, num(qmax), "r"), (99, 106, num(qmin), "r"), (107, 114, num(b[4] / base), "r"),
            (115, 122, num(b[5] / base), "r"), (124, 127, "0", "r"),
        ]))
    return out


def branch_cards(ppc: dict) -> list[str]:
    out = []
    for br in ppc["branch"]:
        ratio = br[8]
        out.append(card([
            (1, 4, str(int(br[0])), "r"), (6, 9, str(int(br[1])), "r"), (11, 12, "1", "r"), (14, 15, "1", "r"),
            (17, 17, "1", "r"), (19, 19, "1" if ratio else "0", "r"), (20, 29, num(br[2]), "r"),
            (30, 40, num(br[3]), "r"), (41, 50, num(br[4]), "r"),
            (51, 55, "0", "r"), (57, 61, "0", "r"), (63, 67, "0", "r"),  # ratings: not given
            (69, 72, "0", "r"), (74, 74, "0", "r"), (77, 82, num(ratio), "r"), (84, 90, num(br[9]), "r"),
            (91, 97, "0.0", "r"), (98, 104, "0.0", "r"), (106, 111, "0.0", "r"), (113, 119, "0.0", "r"),
            (120, 126, "0.0", "r"),
        ]))
    return out


def main() -> None:
    ppc = case14()
    buses, branches = bus_cards(ppc), branch_cards(ppc)
    lines = [TITLE, f"BUS DATA FOLLOWS{len(buses):>30} ITEMS", *buses, "-999",
             f"BRANCH DATA FOLLOWS{len(branches):>27} ITEMS", *branches, "-999",
             "LOSS ZONES FOLLOWS                     1 ITEMS", "  1 IEEE 14 BUS", "-99",
             "INTERCHANGE DATA FOLLOWS                 1 ITEMS",
             " 1    1 Bus 1           0.0  999.99  IEEE14  IEEE 14 Bus Test Case", "-9",
             "TIE LINES FOLLOWS                     0 ITEMS", "-999", "END OF DATA"]
    (HERE / "ieee14cdf.txt").write_text("\n".join(lines) + "\n", encoding="ascii")
    version = importlib.metadata.version("PYPOWER")
    side = {
        "format": "flowgauge-cdf-side", "format_version": 1,
        "description": f"Generator costs and branch ratings of PYPOWER {version} case14, for ieee14cdf.txt",
        "generators": [{"bus": int(g[0]), "cost_c2_per_mw2h": float(c[4]), "cost_c1_per_mwh": float(c[5]),
                        "cost_c0_per_h": float(c[6])} for g, c in zip(ppc["gen"], ppc["gencost"])],
        "branches": [{"from_bus": int(b[0]), "to_bus": int(b[1]), "circuit": 1, "rate_mva": float(b[5])}
                     for b in ppc["branch"]],
    }
    (HERE / "ieee14cdf_side.json").write_text(json.dumps(side, indent=1) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
