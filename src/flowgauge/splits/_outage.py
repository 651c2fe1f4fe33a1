"""The single-outage design (splits ``test-n1`` and ``train-n1``): each sample is one loading of
the training design (:class:`~flowgauge.splits._spanning.Spanning`, reused as it is) on the
network with one element out of service, a branch or a generator.

Which outages: where the network ships a contingency list (network/data/contingencies/<network>.json,
converted from the MATPOWER contingency tables by tools/convert_contingencies.py), the outages
it lists; otherwise every single outage of an in-service branch and of each generator. Either
way the outages that :func:`flowgauge.network.single_outages` refuses (islanding, an island
without generation, a reference bus without generation) are never drawn; their counts by reason
are recorded in the design's parameters.

A draw takes one outage uniformly among the allowed ones, branches and generators together (so
a branch outage with probability branches / (branches + generators)), then the loading, both
from the sample's own stream: the outage first (one integer), then the training design's draw
for the same slot (plain on even slots, steered on odd ones). The loading's feasible extent is
that of the intact network, as in training: a loading the outage makes infeasible is rejected
after its AC optimal power flow and counted by the builder (``branch-outage: opf-...``), and the
slot draws again. Each sample's ``kind`` is ``branch-outage`` or ``generator-outage``.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, ClassVar

import numpy as np

from .._io import canonical_json, hash_arrays, parse_json, read_input_bytes, sha256_hex
from ..errors import InputError
from ..network import Network
from ..network._state import intact_state, single_outages
from ._designs import Loading
from ._spanning import Spanning

__all__ = ["SingleOutage", "ContingencyList", "load_contingencies", "contingency_path", "CONTINGENCY_DIR",
           "OUTAGE_KINDS", "FROM_LIST", "FROM_ALL"]

CONTINGENCY_DIR = Path(__file__).resolve().parent.parent / "network" / "data" / "contingencies"
FORMAT_NAME = "flowgauge-contingencies"
OUTAGE_KINDS = ("branch-outage", "generator-outage")
FROM_LIST = "contingency list"
FROM_ALL = "every single outage"


@dataclass(frozen=True, eq=False)
class ContingencyList:
    """A network's contingency list: ``branches`` and ``generators`` (positions in the network's
    element order, ascending, int64); ``left_out``: outages of the source table left out, counted
    by reason; ``hash``: SHA-256 of the canonical document; ``file``: its name."""

    network: str
    branches: np.ndarray
    generators: np.ndarray
    left_out: dict
    source: dict
    hash: str
    file: str


def contingency_path(name: str) -> Path:
    return CONTINGENCY_DIR / f"{name}.json"


def _int_list(doc: dict, table: str, key: str, where: str) -> np.ndarray:
    v = (doc.get(table) or {}).get(key) if isinstance(doc.get(table), dict) else None
    if not (isinstance(v, list) and all(isinstance(x, int) and not isinstance(x, bool) for x in v)):
        raise InputError("expected a list of whole numbers", where=f"{where}: {table}/{key}")
    return np.array(v, dtype=np.int64)


def load_contingencies(path: str | Path, net: Network) -> ContingencyList:
    """Read a contingency list and check it against ``net`` (positions in range, ascending and
    distinct; each branch's end buses and each generator's bus those of the network; branches in
    service). Bad content raises :class:`InputError` naming the file and the entry."""
    where = str(path)
    doc = parse_json(read_input_bytes(path).decode("utf-8"), where=where)
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME or doc.get("format_version") != 1:
        raise InputError(f"expected a contingency list (format {FORMAT_NAME!r}, format_version 1)", where=where)
    br = _int_list(doc, "branches", "position", where)
    f_id = _int_list(doc, "branches", "from_bus_id", where)
    t_id = _int_list(doc, "branches", "to_bus_id", where)
    gen = _int_list(doc, "generators", "position", where)
    g_bus = _int_list(doc, "generators", "bus_id", where)
    for table, pos, n, extra in (("branches", br, net.n_branch, (f_id, t_id)),
                                 ("generators", gen, net.n_gen, (g_bus,))):
        if any(e.size != pos.size for e in extra):
            raise InputError("expected lists of equal length", where=f"{where}: {table}")
        bad = np.flatnonzero((pos < 0) | (pos >= n))
        if bad.size:
            raise InputError(f"position {int(pos[bad[0]])} outside 0..{n - 1} (network {net.name!r})",
                             where=f"{where}: {table}/position/{int(bad[0])}")
        if pos.size > 1 and not np.all(np.diff(pos) > 0):
            i = int(np.flatnonzero(np.diff(pos) <= 0)[0]) + 1
            raise InputError("expected ascending, distinct positions", where=f"{where}: {table}/position/{i}")
    bad = np.flatnonzero((net.from_bus[br] != f_id) | (net.to_bus[br] != t_id) | ~net.in_service[br])
    if bad.size:
        i = int(bad[0])
        raise InputError(f"branch {int(br[i])} of network {net.name!r} runs {int(net.from_bus[br[i]])}-"
                         f"{int(net.to_bus[br[i]])}{'' if net.in_service[br[i]] else ' and is out of service'}, "
                         f"the list says {int(f_id[i])}-{int(t_id[i])}: not a list for this network",
                         where=f"{where}: branches/position/{i}")
    bad = np.flatnonzero(net.gen_bus[gen] != g_bus)
    if bad.size:
        i = int(bad[0])
        raise InputError(f"generator {int(gen[i])} of network {net.name!r} is at bus {int(net.gen_bus[gen[i]])}, "
                         f"the list says {int(g_bus[i])}: not a list for this network",
                         where=f"{where}: generators/position/{i}")
    left = doc.get("left_out_counts") or {}
    return ContingencyList(network=str(doc.get("network")), branches=br, generators=gen,
                           left_out={str(k): int(v) for k, v in left.items()},
                           source={k: (doc.get("source") or {}).get(k) for k in
                                   ("file", "sha256", "case_file", "package", "package_version")},
                           hash=sha256_hex(canonical_json(doc)), file=Path(path).name)


def _allowed(net: Network, branches: np.ndarray | None, generators: np.ndarray | None):
    """(branches, generators, refused counts by reason) among the given candidates (None: every
    single outage), by :func:`single_outages`."""
    so = single_outages(net)
    if branches is None:
        return so.branches, so.generators, so.counts()
    refused: dict[str, int] = {}
    for r in so.rejected:
        cand = branches if r.table == "branch" else generators
        if np.isin(r.position, cand):
            refused[r.reason] = refused.get(r.reason, 0) + 1
    return (branches[np.isin(branches, so.branches)], generators[np.isin(generators, so.generators)],
            {k: refused[k] for k in sorted(refused)})


@dataclass(frozen=True, eq=False)
class SingleOutage:
    """One loading of the training design and one single outage per sample (module docstring);
    :meth:`fitted` fits the training design and lists the allowed outages."""

    uses_slot: ClassVar[bool] = True
    has_states: ClassVar[bool] = True
    solves_pilot: ClassVar[bool] = True
    name: str = "single-outage"
    loadings: Spanning = field(default_factory=Spanning)
    source: str = ""
    branches: np.ndarray | None = field(default=None, repr=False)
    generators: np.ndarray | None = field(default=None, repr=False)
    refused: dict = field(default_factory=dict)
    candidates: dict = field(default_factory=dict)  # per table: outages listed before the checks
    list_info: dict = field(default_factory=dict)

    def fitted(self, net: Network, solver=None, run=None, store=None, pilot: dict | None = None) -> "SingleOutage":
        if self.branches is not None:
            return self
        loadings = self.loadings.fitted(net, solver, run, store, pilot)
        path = contingency_path(net.name)
        if path.is_file():
            cl = load_contingencies(path, net)
            br, gen, refused = _allowed(net, cl.branches, cl.generators)
            info = {"file": f"contingencies/{cl.file}", "file_hash": cl.hash, "left_out": cl.left_out,
                    "source_file": cl.source.get("file"), "source_sha256": cl.source.get("sha256")}
            cand = {"branches": int(cl.branches.size), "generators": int(cl.generators.size)}
            source = FROM_LIST
        else:
            br, gen, refused = _allowed(net, None, None)
            info = {}
            cand = {"branches": int(np.asarray(net.in_service, bool).sum()), "generators": int(net.n_gen)}
            source = FROM_ALL
        if br.size + gen.size == 0:
            raise InputError("no single outage keeps the network in one piece with generation in every island "
                             f"and at the reference bus (refused: {refused})", where=f"network {net.name!r}")
        return replace(self, loadings=loadings, source=source, branches=np.asarray(br, np.int64),
                       generators=np.asarray(gen, np.int64), refused=refused, candidates=cand, list_info=info)

    def _need(self) -> tuple[np.ndarray, np.ndarray]:
        if self.branches is None or self.generators is None:
            raise InputError("the single-outage design is not fitted to a network", where="design")
        return self.branches, self.generators

    def parameters(self, net: Network) -> dict[str, Any]:
        br, gen = self._need()
        outages = {"source": self.source, "candidates": dict(self.candidates), "branches": int(br.size),
                   "generators": int(gen.size), "refused": dict(self.refused),
                   "list_hash": hash_arrays({"branch": br, "generator": gen}), **self.list_info}
        return {
            "outages": outages,
            "choice": "one outage per sample, uniform over the allowed outages, branches and generators together "
                      "(a branch with probability branches / (branches + generators))",
            "draw_order": "the outage (one integer), then the training design's loading for the same slot, "
                          "from the sample's stream",
            "kinds": list(OUTAGE_KINDS),
            "loadings": {"design": self.loadings.name, "parameters": self.loadings.parameters(net)},
        }

    def outage(self, net: Network, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, str]:
        """One drawn outage: (``branch_in_service`` (n_branch,), ``gen_in_service`` (n_gen,), kind)."""
        br_c, gen_c = self._need()
        j = int(rng.integers(br_c.size + gen_c.size))
        br, gen = intact_state(net)
        if j < br_c.size:
            br[br_c[j]] = False
            return br, gen, OUTAGE_KINDS[0]
        gen[gen_c[j - br_c.size]] = False
        return br, gen, OUTAGE_KINDS[1]

    def draw(self, net: Network, rng: np.random.Generator, solver=None, slot: int = 0) -> Loading | str:
        br, gen, kind = self.outage(net, rng)
        loading = self.loadings.draw(net, rng, solver, slot=slot)
        if isinstance(loading, str):
            return loading
        return replace(loading, kind=kind, branch_in_service=br, gen_in_service=gen)
