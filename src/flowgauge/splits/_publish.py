"""Organiser's mode: publish a split's inputs and manifest, withholding the references.

The published manifest is byte-for-byte the full split's: it still commits to the references'
hash, so the organiser can later show that the references used to score are the committed ones.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

from ..errors import InputError
from ._load import resolve_split
from ._store import MANIFEST_FILE
from ._verify import verify_split

__all__ = ["publish_split"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def publish_split(split: str | Path, out_dir: str | Path) -> Path:
    """Verify the split, then write its inputs and manifest (no references) to ``out_dir``.

    ``split``: a split folder, a split hash or ``NETWORK/SPLIT``. ``out_dir`` must not exist or
    be empty; it appears complete or not at all.
    """
    folder = resolve_split(split)
    report = verify_split(folder)
    if not report.references_present:
        raise InputError("has no references file: publish from the full split", where=str(folder))
    out = Path(out_dir)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise InputError("exists and is not an empty folder", where=str(out))
    import json
    manifest = json.loads((folder / MANIFEST_FILE).read_text(encoding="utf-8"))
    names = [MANIFEST_FILE, manifest["files"]["inputs"]["path"]]
    if manifest["network"].get("file"):
        names.append(manifest["network"]["file"])
    out.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    try:
        os.chmod(stage, 0o777 & ~_umask())  # mkdtemp makes it private (0700); the output is not
        for name in names:
            shutil.copyfile(folder / name, stage / name)
        if out.exists():
            out.rmdir()
        os.replace(stage, out)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    return out
