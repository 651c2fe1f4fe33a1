"""The split manifest: what was built, from what, with which settings, and the hashes that
commit to it. Written as canonical JSON (indented for people); ``split_hash`` is the SHA-256 of
the canonical manifest without ``split_hash``."""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path
from typing import Any

from .._io import atomic_write_bytes, canonical_json, parse_json, read_input_bytes, sha256_hex
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
