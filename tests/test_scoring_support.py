"""Small splits built once per test session for the scoring, baseline and demo tests (frozen
splits are too large for quick tests). Holds no tests itself."""

import atexit
import functools
import shutil
import tempfile
from pathlib import Path

from flowgauge.splits import build_split, load_split
from flowgauge.submission import write_predictions

MODEL = {"name": "test model", "authors": ["flowgauge tests"], "description": "made in a test",
         "training_data_only": True}
SIZES = {"train": 130, "test-id": 20, "test-ood": 20}
SEEDS = {"train": 5, "test-id": 6, "test-ood": 7, "test-edge": 8}  # distinct draws per split


@functools.lru_cache(maxsize=None)
def _root() -> Path:
    root = Path(tempfile.mkdtemp(prefix="flowgauge-scoring-tests-"))
    atexit.register(shutil.rmtree, root, True)
    return root


def split_path(network: str, split: str, samples: int | None = None) -> Path:
    """Folder of a small split ``<root>/<network>/<split>`` built on first use."""
    return _built(network, split, samples or SIZES[split])


@functools.lru_cache(maxsize=None)
def _built(network: str, split: str, samples: int) -> Path:
    out = _root() / network / split
    build_split(network, split, samples=samples, seed=SEEDS[split], out=out)
    return out


def split(network: str, name: str, samples: int | None = None):
    return load_split(split_path(network, name, samples))


def write_reference(sp, path: Path, *, full: bool = True, format: str | None = None) -> Path:
    """The split's reference solutions written as a predictions file."""
    r = sp.references
    write_predictions(sp, pg_mw=r.pg_mw, vm_pu=r.vm_pu, va_deg=r.va_deg if full else None,
                      qg_mvar=r.qg_mvar if full else None, model=MODEL, path=path, format=format)
    return path


def split_copy_with_states(sp, folder: Path, branch, gen, shunt=None) -> Path:
    """A copy of split ``sp`` in ``folder`` with other per-sample state flags, its manifest
    sealed again (so only the flags are wrong)."""
    import json
    from flowgauge.splits._builder import _file_entry
    from flowgauge.splits._manifest import seal_manifest, write_manifest
    from flowgauge.splits._store import inputs_table, write_table
    shutil.copytree(sp.path, folder)
    t = inputs_table(sp.sample_id, sp.pd_mw, sp.qd_mvar, kind=sp.kind, branch_in_service=branch,
                     gen_in_service=gen, shunt_in_service=shunt)
    write_table(t, folder / "inputs.parquet")
    m = json.loads((folder / "manifest.json").read_text())
    m["files"]["inputs"] = _file_entry("inputs.parquet", t, False)
    write_manifest(folder / "manifest.json", seal_manifest(m))
    return folder
