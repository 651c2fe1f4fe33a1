"""The split manifest: what was built, from what, with which settings, and the hashes that
commit to it. Written as canonical JSON (indented for people); ``split_hash`` is the SHA-256 of
the canonical manifest without ``split_hash``.

``identity_hash`` names what a rebuild reproduces: the SHA-256 of the manifest's *identity
view*, the manifest without what is measured on the building machine (solve times, residual
diagnostics and every hash that covers them) or merely descriptive (flowgauge version,
notes). Manifests written since recipes record it; for older ones it is computed from the
manifest (and, for a test split, its training split's identity), so they need no rewrite.
"""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path
from typing import Any

from .._io import atomic_write_bytes, canonical_json, parse_json, read_input_bytes, sha256_hex
from ..errors import InputError
from ..network import Network, network_to_dict

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "STATE_FORMAT_VERSION", "FORMAT_VERSIONS", "SPLIT_NAMES",
           "SCHEMA_PATH", "network_hash", "compute_split_hash", "seal_manifest", "write_manifest", "read_manifest",
           "check_schema", "identity_view", "compute_identity_hash", "NOT_IN_IDENTITY", "MEASURED_COLUMNS"]

FORMAT_NAME = "flowgauge-split-manifest"
FORMAT_VERSION = 1
# Splits whose inputs carry per-sample states (branch_in_service, gen_in_service columns) are
# written as version 2; every other split keeps version 1, byte for byte as before.
STATE_FORMAT_VERSION = 2
FORMAT_VERSIONS = (FORMAT_VERSION, STATE_FORMAT_VERSION)
SPLIT_NAMES = ("train", "test-id", "test-ood", "test-edge", "test-year", "test-n1", "train-local", "train-n1")
SCHEMA_PATH = Path(__file__).resolve().parent.parent / "schema" / "manifest.schema.json"


def network_hash(net: Network) -> str:
    """SHA-256 of the network's canonical JSON: names the exact network a split was built on."""
    return sha256_hex(canonical_json(network_to_dict(net)))


def compute_split_hash(manifest: dict[str, Any]) -> str:
    body = {k: v for k, v in manifest.items() if k != "split_hash"}
    return sha256_hex(canonical_json(body))


# Top-level manifest keys outside the identity view, and why.
NOT_IN_IDENTITY = {
    "split_hash": "covers the measured solve times",
    "identity_hash": "the hash of the view itself",
    "reference_solve_seconds": "measured on the building machine",
    "flowgauge_version": "descriptive: another version that reproduces the content is the same split",
    "notes": "descriptive text",
}
# Reference columns that are measurements of the building machine, not results: the solve time,
# and the residual diagnostics, which are rounding noise of the solution (powers of 1e-13 MW in
# a reference whose outputs agree to every stored digit: the frozen ieee14 test-edge rebuilt in
# another environment). The acceptance decision they feed is reproducible: it shows in which
# draws are kept and in the rejection counts. The view keeps every other column's hash and drops
# the file's ``hash`` and ``solution_hash``, which cover these columns.
MEASURED_COLUMNS = ("solve_seconds", "max_p_mismatch_mw", "max_q_mismatch_mvar", "max_limit_violation")


def identity_view(manifest: dict[str, Any], train_identity: str | None = None) -> dict[str, Any]:
    """The reproducible part of a manifest: inputs, references without the measured columns
    (:data:`MEASURED_COLUMNS`), rejections, design, seed, network, element order, solver
    settings, acceptance and coverage.

    A test split built beside a training split refers to it by ``split_hash`` (which covers the
    training split's solve times); the view refers to it by its identity hash instead, taken
    from ``train/identity_hash`` or, for manifests written before recipes, ``train_identity``.
    """
    view = json.loads(canonical_json({k: v for k, v in manifest.items() if k not in NOT_IN_IDENTITY}))
    refs = view.get("files", {}).get("references", {})
    refs.pop("hash", None)
    refs.pop("solution_hash", None)
    for name in MEASURED_COLUMNS:
        refs.get("columns", {}).pop(name, None)
    train = view.get("train")
    if train is not None:
        ident = train.get("identity_hash") or train_identity
        if not ident:
            raise InputError("the identity of a test split needs its training split's identity hash (this "
                             "manifest predates it): give the training split it was built beside",
                             where="train")
        old = train.pop("split_hash", None)
        train["identity_hash"] = ident
        params = view.get("design", {}).get("parameters", {})
        if old is not None and params.get("train_split_hash") == old:
            params["train_split_hash"] = ident  # the design names its training split the same way
    return view


def compute_identity_hash(manifest: dict[str, Any], train_identity: str | None = None) -> str:
    """SHA-256 of the canonical :func:`identity_view`: what a rebuild from a recipe reproduces."""
    return sha256_hex(canonical_json(identity_view(manifest, train_identity)))


def seal_manifest(manifest: dict[str, Any]) -> dict[str, Any]:
    """A copy with ``identity_hash`` and ``split_hash`` filled in (``split_hash`` last: it covers
    ``identity_hash`` too)."""
    out = {k: v for k, v in manifest.items() if k not in ("split_hash", "identity_hash")}
    out["identity_hash"] = compute_identity_hash(out)
    out["split_hash"] = compute_split_hash(out)
    return out


def write_manifest(path: Path, manifest: dict[str, Any]) -> None:
    atomic_write_bytes(path, canonical_json(manifest, indent=1))


@lru_cache(maxsize=1)
def _validator():
    import jsonschema
    schema = json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))
    return jsonschema.Draft202012Validator(schema)


def check_schema(manifest: Any, source: str) -> None:
    """Raise :class:`InputError` naming the JSON pointer of the first schema violation."""
    errors = sorted(_validator().iter_errors(manifest), key=lambda e: list(e.absolute_path))
    if errors:
        e = errors[0]
        pointer = "/" + "/".join(str(p) for p in e.absolute_path)
        raise InputError(f"manifest does not follow its schema: {e.message}", where=f"{source}: {pointer}")


MAX_MANIFEST_BYTES = 100 * 10**6  # element id lists of a 100,000-bus network fit many times over


def parse_manifest(data: bytes, where: str) -> Any:
    """The manifest's JSON (not yet schema-checked); :class:`InputError` for text that is not
    JSON, keys given twice, or nesting too deep."""
    try:
        return parse_json(data.decode("utf-8"), where=where)
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start})", where=where) from None
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON ({exc})", where=where) from None


def read_manifest(path: Path) -> dict[str, Any]:
    """Read and schema-check a manifest (no hash checks: see ``verify_split``)."""
    if not Path(path).exists():
        raise InputError("no manifest.json here: not a finished split", where=str(path))
    data = parse_manifest(read_input_bytes(path, expected="a split manifest", max_bytes=MAX_MANIFEST_BYTES),
                          str(path))
    check_schema(data, str(path))
    return data
