"""Frozen splits: sampling designs, the resumable builder (local processes or Dask), manifests
and hashes, verification, loading as arrays, and publishing without references.

Layout of a split folder ``splits/<network>/<split>/``: ``inputs.parquet``,
``references.parquet`` and ``manifest.json`` (docs/splits.md).
"""

from __future__ import annotations

from ._builder import BuildProgress, build_split
from ._designs import DESIGNS, SPLIT_DESIGN, Edge, LevelLocal, Shifted
from ._load import Split, find_split, list_splits, load_split, resolve_split, splits_root
from ._manifest import SPLIT_NAMES, network_hash
from ._publish import publish_split
from ._recipe import (Agreement, build_from_recipe, check_split_against_recipe, read_recipe, recipe_from_split, recipes_root,
                      write_recipe)
from ._store import References
from ._summary import SplitSummary, summarize_split
from ._verify import VerifyReport, verify_split

__all__ = [
    "Split", "References", "load_split", "find_split", "list_splits", "resolve_split", "splits_root",
    "verify_split", "VerifyReport", "publish_split", "build_split", "BuildProgress",
    "summarize_split", "SplitSummary", "network_hash", "SPLIT_NAMES", "DESIGNS", "SPLIT_DESIGN",
    "LevelLocal", "Shifted", "Edge", "recipe_from_split", "write_recipe", "read_recipe", "build_from_recipe", "Agreement",
    "check_split_against_recipe", "recipes_root",
]
