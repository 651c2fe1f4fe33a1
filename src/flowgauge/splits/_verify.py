"""Verifying a split: every recorded hash recomputed, the manifest checked against its schema,
shapes and sample ids checked against the manifest. Any difference raises IntegrityError naming
the file and what differs."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._io import hash_arrays
from ..errors import InputError, IntegrityError
from ._load import split_network
from .._io import read_input_bytes
from ._manifest import MAX_MANIFEST_BYTES, check_schema, compute_identity_hash, compute_split_hash, parse_manifest
from ._store import MANIFEST_FILE, read_table, table_columns

__all__ = ["VerifyReport", "verify_split"]


@dataclass(frozen=True)
class VerifyReport:
    """What was checked: ``files`` verified; ``references_present`` False for a published split."""

    path: Path
    split_hash: str
    network: str
    split: str
    samples: int
    files: tuple[str, ...]
    references_present: bool
    # what a rebuild reproduces: recorded, or computed for manifests written before recipes
    # (None for such a test split: its identity needs its training split's)
    identity_hash: str | None = None


def _manifest(folder: Path) -> dict:
    path = folder / MANIFEST_FILE
    if not path.exists():
        raise InputError("no manifest.json here: not a finished split", where=str(folder))
    try:
        data = parse_manifest(read_input_bytes(path, expected="a split manifest", max_bytes=MAX_MANIFEST_BYTES),
                              str(path))
        check_schema(data, str(path))
    except InputError as exc:
        raise IntegrityError(exc.message, where=exc.where) from None
    got = compute_split_hash(data)
    if got != data["split_hash"]:
        raise IntegrityError(f"split_hash recorded {data['split_hash'][:16]}..., the manifest's content gives "
                             f"{got[:16]}... (the manifest was changed)", where=str(path))
    if "identity_hash" in data:
        got = compute_identity_hash(data)
        if got != data["identity_hash"]:
            raise IntegrityError(f"identity_hash recorded {data['identity_hash'][:16]}..., the manifest's content "
                                 f"gives {got[:16]}... (the manifest was changed)", where=str(path))
    return data


def _identity(m: dict) -> str | None:
    if "identity_hash" in m:
        return m["identity_hash"]
    if "train" in m and "identity_hash" not in m["train"]:
        return None
    return compute_identity_hash(m)


def _check_file(folder: Path, entry: dict, manifest: dict) -> dict[str, np.ndarray]:
    path = folder / entry["path"]
    if not path.exists():
        raise IntegrityError("missing: the manifest lists this file", where=str(path))
    try:
        cols = table_columns(read_table(path))
    except InputError as exc:
        raise IntegrityError(exc.message, where=exc.where) from None
    recorded = entry["columns"]
    for name in sorted(set(recorded) | set(cols)):
        if name not in cols:
            raise IntegrityError(f"column {name} is missing", where=str(path))
        if name not in recorded:
            raise IntegrityError(f"column {name} is not in the manifest", where=str(path))
        got = hash_arrays({name: cols[name]})
        if got != recorded[name]:
            raise IntegrityError(f"column {name} differs from the manifest (hash recorded {recorded[name][:16]}..., "
                                 f"content gives {got[:16]}...)", where=str(path))
    got = hash_arrays(cols)
    if got != entry["hash"]:
        raise IntegrityError(f"content hash recorded {entry['hash'][:16]}..., content gives {got[:16]}...",
                             where=str(path))
    n = manifest["samples"]
    if not np.array_equal(cols["sample_id"], np.arange(n)):
        raise IntegrityError(f"sample_id is not 0..{n - 1} as the manifest says", where=str(path))
    el = manifest["elements"]
    sizes = {"pd_mw": "load_id", "qd_mvar": "load_id", "pg_mw": "gen_id", "qg_mvar": "gen_id",
             "vm_pu": "bus_id", "va_deg": "bus_id"}
    for name, ids in sizes.items():
        if name in cols and cols[name].shape != (n, len(el[ids])):
            raise IntegrityError(f"column {name} has shape {cols[name].shape}, the manifest says "
                                 f"({n}, {len(el[ids])})", where=str(path))
    return cols


def _check_states(folder: Path, m: dict, cols: dict, net) -> None:
    """Version 2 splits carry per-sample states, version 1 splits none; every state is one the
    network allows (:func:`flowgauge.network.check_states`: an InputError names sample and element)."""
    from ..network import check_states
    from ._manifest import STATE_FORMAT_VERSION
    from ._store import SHUNT_COLUMN, STATE_COLUMNS
    have = [c for c in STATE_COLUMNS if c in cols]
    path = str(folder / m["files"]["inputs"]["path"])
    if SHUNT_COLUMN in cols and len(have) != len(STATE_COLUMNS):
        raise IntegrityError(f"column {SHUNT_COLUMN} without {' and '.join(STATE_COLUMNS)} (bus shunt flags are "
                             "part of a per-sample state)", where=path)
    if bool(have) != (m["format_version"] >= STATE_FORMAT_VERSION):
        what = "carry" if have else "carry no"
        raise IntegrityError(f"the inputs {what} per-sample states (columns {', '.join(STATE_COLUMNS)}), the "
                             f"manifest's format_version is {m['format_version']} (states: version "
                             f"{STATE_FORMAT_VERSION}, none: version 1)", where=path)
    if have:
        if len(have) != len(STATE_COLUMNS):
            raise IntegrityError(f"column {have[0]} without {[c for c in STATE_COLUMNS if c not in have][0]}",
                                 where=path)
        shunt = cols.get(SHUNT_COLUMN)
        if shunt is not None and shunt.shape != (m["samples"], len(m["elements"]["bus_id"])):
            raise IntegrityError(f"column {SHUNT_COLUMN} has shape {shunt.shape}, the manifest says "
                                 f"({m['samples']}, {len(m['elements']['bus_id'])})", where=path)
        check_states(net, cols["branch_in_service"], cols["gen_in_service"], cols["sample_id"],
                     shunt_in_service=shunt)


def verify_split(path: str | Path) -> VerifyReport:
    """Recompute every hash of the split in folder ``path``; raise IntegrityError on any difference.

    A published split (no references file) is verified without its references; the manifest
    still commits to their hash.
    """
    folder = Path(path)
    m = _manifest(folder)
    files = [MANIFEST_FILE]
    in_cols = _check_file(folder, m["files"]["inputs"], m)
    files.append(m["files"]["inputs"]["path"])
    ref_entry = m["files"]["references"]
    present = (folder / ref_entry["path"]).exists()
    if present:
        _check_file(folder, ref_entry, m)
        files.append(ref_entry["path"])
    net = split_network(m, folder)
    el = m["elements"]
    for key in ("bus_id", "gen_id", "load_id", "branch_id"):
        if getattr(net, key).tolist() != el[key]:
            raise IntegrityError(f"elements/{key} differs from the network's order", where=str(folder / MANIFEST_FILE))
    _check_states(folder, m, in_cols, net)
    return VerifyReport(path=folder, split_hash=m["split_hash"], network=m["network"]["name"], split=m["split"],
                        samples=m["samples"], files=tuple(files), references_present=present,
                        identity_hash=_identity(m))
