"""Networks: the :class:`Network` type, our JSON format, IEEE Common Data Format and MATPOWER
case format import, bundled networks and the synthetic network generator."""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from ._json import network_from_dict, network_to_dict, read_network_json, write_network_json
from ._model import BUS_PQ, BUS_PV, BUS_REF, Network
from ._ppc import to_ppc, to_ppc_for_pandapower
from ._state import (EDGE_FEATURES, ISLAND_WITHOUT_GENERATION, ISLANDING, NODE_FEATURES, REASONS,
                     REFERENCE_WITHOUT_GENERATION, GraphView, Rejection, SingleOutages, StateProblem,
                     binding_in_state, check_state, check_states, group_states, intact_state,
                     network_in_state, sample_graph, single_outages, state_problem)

__all__ = [
    "Network", "BUS_PQ", "BUS_PV", "BUS_REF",
    "load_network", "bundled_names", "network_from_dict", "network_to_dict",
    "read_network_json", "write_network_json", "synthetic", "read_cdf", "read_matpower", "write_matpower",
    "to_ppc", "to_ppc_for_pandapower",
    # per-sample network state (docs/topology.md)
    "intact_state", "check_state", "check_states", "state_problem", "network_in_state", "single_outages",
    "group_states", "binding_in_state", "sample_graph", "GraphView", "SingleOutages", "Rejection",
    "StateProblem", "EDGE_FEATURES", "NODE_FEATURES", "REASONS", "ISLANDING", "ISLAND_WITHOUT_GENERATION",
    "REFERENCE_WITHOUT_GENERATION",
]

DATA_DIR = Path(__file__).parent / "data"


def bundled_names() -> list[str]:
    """Names of the bundled networks, demo first, then the IEEE systems by size, each limit
    variant right after its original (``ieee14``, ``ieee14-limits``, ...), then the large
    public systems by size."""
    names = [p.stem for p in DATA_DIR.glob("*.json")]
    order = {"demo": 0, "ieee14": 1, "ieee30": 2, "ieee57": 3, "ieee118": 4, "ieee300": 5,
             "activsg200": 6, "pegase1354": 7, "activsg2000": 8, "pegase2869": 9}

    def key(n: str):
        base = n.removesuffix("-limits")
        return (order.get(base, 99), base, n != base, n)
    return sorted(names, key=key)


def load_network(spec: str | Path) -> Network:
    """A bundled network by name, or a network file: our JSON format (``.json``), a MATPOWER
    case (``.m``) or the IEEE Common Data Format (any other file)."""
    spec_s = str(spec)
    if spec_s in bundled_names():
        return read_network_json(DATA_DIR / f"{spec_s}.json")
    path = Path(spec_s)
    if not path.exists():
        raise InputError(
            f"not a bundled network and no such file (bundled: {', '.join(bundled_names())})",
            where=spec_s)
    if path.suffix.lower() == ".json":
        return read_network_json(path)
    if path.suffix.lower() == ".m":
        from ._matpower import read_matpower
        return read_matpower(path)
    from ._cdf import read_cdf
    return read_cdf(path)


def __getattr__(name: str):
    if name == "synthetic":
        from ._synthetic import synthetic
        return synthetic
    if name == "read_cdf":
        from ._cdf import read_cdf
        return read_cdf
    if name in ("read_matpower", "write_matpower"):
        from . import _matpower
        return getattr(_matpower, name)
    raise AttributeError(name)
