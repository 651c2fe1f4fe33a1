"""The split manifest: what was built, from what, with which settings, and the hashes that
commit to it. Written as canonical JSON (indented for people); ``split_hash`` is the SHA-256 of
the canonical manifest without ``split_hash``."""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path
from typing import Any

from .._io import atomic_write_bytes, canonical_json, sha256_hex
from ..errors import InputError
from ..network import Network, network_to_dict

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "SPLIT_NAMES", "SCHEMA_PATH", "network_hash",
           "compute_split_hash", "seal_manifest", "write_manifest", "read_manifest", "check_schema"]

FORMAT_NAME = "flowgauge-split-manifest"
FORMAT_VERSION = 1
SPLIT_NAMES = ("train", "test-id", "test-ood", "test-edge", "train-local")
SCHEMA_PATH = Path(__file__).resolve().parent.parent / "schema" / "manifest.schema.json"


def network_hash(net: Network) -> str:
    """SHA-256 of the network's canonical JSON: names the exact network a split was built on."""
    return sha256_hex(canonical_json(network_to_dict(net)))


def compute_split_hash(manifest: dict[str, Any]) -> str:
    body = {k: v for k, v in manifest.items() if k != "split_hash"}
    return sha256_hex(canonical_json(body))


def seal_manifest(manifest: dict[str, Any]) -> dict[str, Any]:
    """A copy with ``split_hash`` filled in."""
    out = {k: v for k, v in manifest.items() if k != "split_hash"}
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


def read_manifest(path: Path) -> dict[str, Any]:
    """Read and schema-check a manifest (no hash checks: see ``verify_split``)."""
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("no manifest.json here: not a finished split", where=str(path)) from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"not valid JSON ({exc})", where=str(path)) from None
    check_schema(data, str(path))
    return data
