"""Finding and loading splits: :func:`load_split`, :func:`find_split`, :func:`list_splits`."""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..network import Network, bundled_names, load_network
from ._manifest import SPLIT_NAMES, network_hash, read_manifest
from ._store import (MANIFEST_FILE, References, inputs_from_table, kinds_from_table,
                     read_table, references_from_table, shunt_state_from_table, state_from_table)

__all__ = ["Split", "splits_root", "list_splits", "find_split", "resolve_split", "load_split",
           "split_network"]

_HASH_RE = re.compile(r"^[0-9a-f]{64}$")


def splits_root() -> Path:
    """Folder of the frozen splits: ``$FLOWGAUGE_SPLITS`` if set, else the repository's ``splits/``."""
    env = os.environ.get("FLOWGAUGE_SPLITS")
    if env:
        return Path(env)
    return Path(__file__).resolve().parents[3] / "splits"


def list_splits(root: str | Path | None = None) -> list[Path]:
    """Folders ``<network>/<split>`` under ``root`` that hold a ``manifest.json``, sorted."""
    root = Path(root) if root is not None else splits_root()
    if not root.is_dir():
        return []
    return sorted(p.parent for p in root.glob(f"*/*/{MANIFEST_FILE}"))


def find_split(split_hash: str, root: str | Path | None = None) -> Path:
    """The folder of the frozen split whose manifest has this ``split_hash``."""
    for path in list_splits(root):
        if read_manifest(path / MANIFEST_FILE)["split_hash"] == split_hash:
            return path
    where_root = Path(root) if root is not None else splits_root()
    raise InputError(f"no split with this split_hash under {where_root}", where=split_hash)


def resolve_split(spec: str | Path, split: str | None = None) -> Path:
    """The folder meant by a split folder path, a split hash, ``NETWORK/SPLIT`` or (NETWORK, SPLIT)."""
    if split is not None:
        if split not in SPLIT_NAMES:
            raise InputError(f"expected one of {', '.join(SPLIT_NAMES)}, got {split!r}", where="split")
        path = splits_root() / str(spec) / split
        if not (path / MANIFEST_FILE).exists():
            have = ", ".join(f"{p.parent.name}/{p.name}" for p in list_splits()) or "none"
            raise InputError(f"no frozen split {spec}/{split} (frozen splits: {have})", where=str(path))
        return path
    s = str(spec)
    path = Path(s)
    if (path / MANIFEST_FILE).exists():
        return path
    if _HASH_RE.match(s):
        return find_split(s)
    if s.count("/") == 1 and not path.exists():
        net, name = s.split("/")
        return resolve_split(net, name)
    if path.is_dir():
        raise InputError("no manifest.json here: not a finished split", where=s)
    raise InputError("expected a split folder, a split hash or NETWORK/SPLIT (e.g. ieee14/test-id)", where=s)


def split_network(manifest: dict[str, Any], folder: Path) -> Network:
    """The network a split was built on, checked against the manifest's content hash."""
    from ..errors import IntegrityError
    info = manifest["network"]
    if info.get("file"):
        net = load_network(folder / info["file"])
        source = str(folder / info["file"])
    elif info["name"] in bundled_names():
        net = load_network(info["name"])
        source = f"bundled network {info['name']}"
    else:
        raise InputError(f"network {info['name']!r} is neither bundled nor stored with the split",
                         where=str(folder / MANIFEST_FILE))
    got = network_hash(net)
    if got != info["content_hash"]:
        raise IntegrityError(f"network content hash {got[:12]}... differs from the manifest's "
                             f"{info['content_hash'][:12]}... (the network changed since the split was built)",
                             where=source)
    return net


@dataclass(frozen=True, eq=False)
class Split:
    """One split loaded as arrays.

    ``sample_id``: (S,) int; ``pd_mw``, ``qd_mvar``: (S, n_load) [MW], [MVAr] in ``load_id``
    order; ``references``: :class:`References` (None for a published split without references);
    ``bus_id``, ``gen_id``, ``load_id``, ``branch_id``: the element order of every array.
    ``branch_in_service`` (S, n_branch), ``gen_in_service`` (S, n_gen) bool: per-sample states,
    None for splits whose samples all run on the network as it is (:meth:`state` then gives the
    intact state). ``shunt_in_service`` (S, n_bus) bool: which bus shunts are connected in each
    sample (splits whose design switches capacitor banks, for example ``test-year`` on
    ``activsg2000``), None when every sample has the network's shunts.
    """

    path: Path
    manifest: dict[str, Any]
    sample_id: np.ndarray
    pd_mw: np.ndarray
    qd_mvar: np.ndarray
    references: References | None = field(default=None)
    kind: np.ndarray | None = field(default=None)  # (S,) str: the kind of draw (splits since format 2)
    branch_in_service: np.ndarray | None = field(default=None)
    gen_in_service: np.ndarray | None = field(default=None)
    shunt_in_service: np.ndarray | None = field(default=None)

    @property
    def has_states(self) -> bool:
        """Whether the split's inputs carry per-sample in-service flags."""
        return self.branch_in_service is not None

    def _row(self, i) -> int:
        n = self.n_samples
        if isinstance(i, (bool, np.bool_)) or not isinstance(i, (int, np.integer)) or not 0 <= int(i) < n:
            raise InputError(f"expected a sample position from 0 to {n - 1} (a row, not a sample id), got {i!r}",
                             where=f"split {self.network_name}/{self.name}")
        return int(i)

    def state(self, i: int) -> tuple[np.ndarray, np.ndarray]:
        """The state of the sample in row ``i``: (``branch_in_service`` (n_branch,),
        ``gen_in_service`` (n_gen,)) bool, in the manifest's element order, checked against the
        network (:func:`flowgauge.network._state.check_state`, errors naming the sample id)."""
        from ..network._state import check_state, intact_state
        row = self._row(i)
        if self.branch_in_service is None:
            return intact_state(self.network)
        return check_state(self.network, self.branch_in_service[row], self.gen_in_service[row],
                           sample=int(self.sample_id[row]))

    def shunt_state(self, i: int) -> np.ndarray | None:
        """The bus shunt flags of the sample in row ``i`` (n_bus,) bool, or None when the split
        keeps the network's shunts."""
        row = self._row(i)
        return None if self.shunt_in_service is None else self.shunt_in_service[row].copy()

    def state_network(self, i: int) -> Network:
        """The network of the sample in row ``i`` (:func:`flowgauge.network._state.network_in_state`):
        same shapes and element order, the solvers run on it unchanged."""
        from ..network._state import network_in_state
        br, gen = self.state(i)
        return network_in_state(self.network, br, gen, sample=int(self.sample_id[self._row(i)]),
                                shunt_in_service=self.shunt_state(i))

    def graph(self, i: int):
        """The sample in row ``i`` as a graph (:class:`flowgauge.network._state.GraphView`): the
        in-service branches as an edge list (n_edge, 2) of bus positions with per-edge features
        (r, x, b [p.u.], rating [MVA], tap, shift [deg]) and per-bus features (loads [MW], [MVAr],
        shunts, voltage limits [p.u.], in-service generator limits [MW], [MVAr], bus type)."""
        from ..network._state import sample_graph
        row = self._row(i)
        br, gen = self.state(row)
        return sample_graph(self.network, br, self.pd_mw[row], self.qd_mvar[row], gen,
                            sample=int(self.sample_id[row]), shunt_in_service=self.shunt_state(row))

    @property
    def name(self) -> str:
        return self.manifest["split"]

    @property
    def network_name(self) -> str:
        return self.manifest["network"]["name"]

    @property
    def split_hash(self) -> str:
        return self.manifest["split_hash"]

    @property
    def has_references(self) -> bool:
        return self.references is not None

    @property
    def n_samples(self) -> int:
        return int(self.sample_id.shape[0])

    @cached_property
    def network(self) -> Network:
        return split_network(self.manifest, self.path)

    def _ids(self, key: str) -> np.ndarray:
        return np.asarray(self.manifest["elements"][key], dtype=np.int64)

    @property
    def bus_id(self) -> np.ndarray:
        return self._ids("bus_id")

    @property
    def gen_id(self) -> np.ndarray:
        return self._ids("gen_id")

    @property
    def load_id(self) -> np.ndarray:
        return self._ids("load_id")

    @property
    def branch_id(self) -> np.ndarray:
        return self._ids("branch_id")

    def to_pandas(self):
        """One row per sample, one column per element value (``pd_mw:<load id>``, ``pg_mw:<gen id>``,
        ``vm_pu:<bus id>``, ..., and ``branch_in_service:<branch id>``, ``gen_in_service:<gen id>``
        (and ``shunt_in_service:<bus id>``) for splits with per-sample states) plus the per-sample reference columns."""
        import pandas as pd
        blocks = [pd.DataFrame({"sample_id": self.sample_id})]
        def block(prefix, arr, ids):
            return pd.DataFrame(arr, columns=[f"{prefix}:{i}" for i in ids.tolist()])
        blocks += [block("pd_mw", self.pd_mw, self.load_id), block("qd_mvar", self.qd_mvar, self.load_id)]
        if self.has_states:  # per-sample states: one bool column per branch and generator
            blocks += [block("branch_in_service", self.branch_in_service, self.branch_id),
                       block("gen_in_service", self.gen_in_service, self.gen_id)]
        if self.shunt_in_service is not None:
            blocks.append(block("shunt_in_service", self.shunt_in_service, self.bus_id))
        r = self.references
        if r is not None:
            blocks += [block("pg_mw", r.pg_mw, self.gen_id), block("qg_mvar", r.qg_mvar, self.gen_id),
                       block("vm_pu", r.vm_pu, self.bus_id), block("va_deg", r.va_deg, self.bus_id),
                       pd.DataFrame({"objective_per_h": r.objective, "status": r.status,
                                     "iterations": r.iterations, "margin": r.margin,
                                     "signature": r.signature, "solve_seconds": r.solve_seconds})]
        df = pd.concat(blocks, axis=1)
        return df.set_index("sample_id")


def load_split(network_or_path: str | Path, split: str | None = None, *, references: bool = True) -> Split:
    """Load a split as arrays.

    ``load_split("ieee14", "test-id")`` loads a frozen split; ``load_split(path)`` a split folder;
    ``load_split(split_hash)`` the frozen split with that hash. ``references=False`` skips the
    references file (a published split has none). Hashes are not checked here: ``verify_split``.
    """
    folder = resolve_split(network_or_path, split)
    manifest = read_manifest(folder / MANIFEST_FILE)
    inputs_path = folder / manifest["files"]["inputs"]["path"]
    table = read_table(inputs_path)
    sample_id, pd_mw, qd_mvar = inputs_from_table(table, inputs_path)
    kind = kinds_from_table(table)
    state = state_from_table(table, inputs_path, len(manifest["elements"]["branch_id"]),
                             len(manifest["elements"]["gen_id"]))
    shunt = shunt_state_from_table(table, inputs_path, len(manifest["elements"]["bus_id"]))
    n_load = len(manifest["elements"]["load_id"])
    if pd_mw.shape != (manifest["samples"], n_load):
        raise InputError(f"expected pd_mw of shape ({manifest['samples']}, {n_load}) as the manifest says, "
                         f"got {pd_mw.shape}", where=str(inputs_path))
    refs = None
    ref_path = folder / manifest["files"]["references"]["path"]
    if references and ref_path.exists():
        refs = references_from_table(read_table(ref_path), ref_path)
    return Split(path=folder, manifest=manifest, sample_id=sample_id, pd_mw=pd_mw, qd_mvar=qd_mvar,
                 references=refs, kind=kind,
                 branch_in_service=None if state is None else state[0],
                 gen_in_service=None if state is None else state[1], shunt_in_service=shunt)
