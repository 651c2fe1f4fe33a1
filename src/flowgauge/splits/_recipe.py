"""Recipes: a split described by what rebuilds it and by the hashes the rebuild must reproduce.

A recipe (``recipes/<network>/<split>.json``, schema ``schema/recipe.schema.json``) records the
network's content hash, the split, its design and fitted parameters, seed, sample count,
chunking, solver settings and acceptance, and the expected result: the identity hash, the
inputs hash, the solution hash, the rejected draws and, per sample, a short digest of its row
of each file. :func:`recipe_from_split` writes one from a built split; :func:`build_from_recipe`
rebuilds the split and checks it as it goes: the design before anything is solved, every chunk
before it is kept (naming the first sample that differs and the file), the manifest before the
split is put in place. Any difference raises :class:`IntegrityError` (exit 3).
"""

from __future__ import annotations

import json
import os
from functools import lru_cache
from pathlib import Path
from typing import Any, Callable

import numpy as np

from .. import __version__
from .._io import atomic_write_bytes, canonical_json, clip_text, hash_arrays, parse_json, read_input_bytes
from ..errors import InputError, IntegrityError
from ..network import bundled_names, load_network
from ._builder import DEFAULT_CHUNK, BuildProgress, build_split, train_identity
from ._designs import SEED_RULE
from ._manifest import MEASURED_COLUMNS, SPLIT_NAMES, compute_identity_hash, identity_view, network_hash
from ._store import MANIFEST_FILE, read_table, table_columns

__all__ = ["RECIPE_FORMAT", "RECIPE_VERSION", "RECIPE_SCHEMA_PATH", "Expectation", "recipe_from_split",
           "write_recipe", "read_recipe", "build_from_recipe", "check_split_against_recipe",
           "recipes_root", "resolve_recipe", "sample_digests", "RECIPE_MAX_ATTEMPTS"]

RECIPE_FORMAT = "flowgauge-split-recipe"
RECIPE_VERSION = 1
RECIPE_SCHEMA_PATH = Path(__file__).resolve().parent.parent / "schema" / "recipe.schema.json"
DIGEST_HEX = 16  # 64 bits per sample: locates a difference; the full hashes decide it
PER_LINE = 64  # sample digests per string in the file (lines of 1,024 characters)
# Draws tried per sample in a rebuild. The content does not depend on it (a sample keeps its
# first accepted attempt); it only has to be at least what the original build needed, which
# a manifest does not record (the freeze tool allows 80 for test-ood).
RECIPE_MAX_ATTEMPTS = 100
MAX_RECIPE_BYTES = 200 * 10**6


def recipes_root() -> Path:
    """Folder of the committed recipes: ``$FLOWGAUGE_RECIPES`` if set, else the repository's ``recipes/``."""
    env = os.environ.get("FLOWGAUGE_RECIPES")
    return Path(env) if env else Path(__file__).resolve().parents[3] / "recipes"


def resolve_recipe(spec: str | Path) -> Path:
    """A recipe file path, or ``NETWORK/SPLIT`` for ``recipes/<network>/<split>.json``."""
    path = Path(spec)
    if path.is_file():
        return path
    s = str(spec)
    if s.count("/") == 1 and not s.endswith(".json"):
        candidate = recipes_root() / f"{s}.json"
        if candidate.is_file():
            return candidate
        raise InputError(f"no recipe {s} (looked for {candidate})", where=s)
    raise InputError("expected a recipe file or NETWORK/SPLIT (e.g. ieee14/train)", where=s)


# -- per-sample digests ----------------------------------------------------------------------

def sample_digests(columns: dict[str, np.ndarray], hex_digits: int = DIGEST_HEX) -> list[str]:
    """Per row: the first ``hex_digits`` of :func:`hash_arrays` over that row of every column
    (each column sliced to shape (1, ...)), the measured columns (solve time, residual
    diagnostics: ``MEASURED_COLUMNS``) left out."""
    cols = {k: v for k, v in columns.items() if k not in MEASURED_COLUMNS}
    n = len(next(iter(cols.values())))
    return [hash_arrays({k: v[i:i + 1] for k, v in cols.items()})[:hex_digits] for i in range(n)]


def _pack(digests: list[str], per_line: int = PER_LINE) -> list[str]:
    return ["".join(digests[i:i + per_line]) for i in range(0, len(digests), per_line)]


def _unpack(lines: list[str], hex_digits: int) -> list[str]:
    text = "".join(lines)
    return [text[i:i + hex_digits] for i in range(0, len(text), hex_digits)]


# -- writing a recipe from a built split -----------------------------------------------------

def recipe_from_split(folder: str | Path, *, chunk: int = DEFAULT_CHUNK, max_attempts: int = RECIPE_MAX_ATTEMPTS,
                      train: str | Path | None = None) -> dict[str, Any]:
    """The recipe of the split in ``folder`` (verified first; its references must be present).

    ``train``: the training split a test split was built beside (default: the sibling folder
    ``train``), needed only for manifests written before recipes, which name it by
    ``split_hash`` alone.
    """
    from ._load import load_split, resolve_split
    from ._verify import verify_split
    folder = resolve_split(folder)
    verify_split(folder)
    m = json.loads((folder / MANIFEST_FILE).read_text(encoding="utf-8"))
    where = str(folder / MANIFEST_FILE)
    if m.get("seed_rule") != SEED_RULE:
        raise InputError(f"built with the earlier seed rule ({m.get('seed_rule', 'slot-attempt')!r}); this "
                         f"flowgauge draws with {SEED_RULE!r} and cannot rebuild it", where=where)
    if m["network"]["name"] not in bundled_names() and not m["network"].get("file"):
        raise InputError("the network is neither bundled nor stored with the split", where=where)
    for name, value in (("chunk", chunk), ("max_attempts", max_attempts)):
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise InputError(f"expected an integer >= 1, got {value!r}", where=name)
    t_ident = None
    if "train" in m and "identity_hash" not in m["train"]:
        t_folder = Path(train) if train is not None else folder.parent / "train"
        t = load_split(t_folder, references=False)
        if t.split_hash != m["train"]["split_hash"]:
            raise InputError(f"not the training split this split was built beside (its split_hash "
                             f"{t.split_hash[:16]}..., the manifest names {m['train']['split_hash'][:16]}...)",
                             where=str(t_folder))
        t_ident = train_identity(t)
    view = identity_view(m, t_ident)
    ref_entry = m["files"]["references"]
    if not (folder / ref_entry["path"]).exists():
        raise InputError("a published split (references withheld) has no per-sample reference digests; "
                         "write the recipe from the full split", where=str(folder))
    digests = {key: _pack(sample_digests(table_columns(read_table(folder / m["files"][key]["path"]))))
               for key in ("inputs", "references")}
    recipe = {
        "format": RECIPE_FORMAT, "format_version": RECIPE_VERSION,
        "network": {"name": m["network"]["name"], "content_hash": m["network"]["content_hash"]},
        "split": m["split"], "design": view["design"], "seed": m["seed"], "seed_rule": m["seed_rule"],
        "samples": m["samples"], "build": {"chunk": chunk, "max_attempts": max_attempts},
        "solver": m["solver"], "acceptance": m["acceptance"], "notes": m["notes"],
        "expected": {"identity_hash": compute_identity_hash(m, t_ident),
                     "inputs_hash": m["files"]["inputs"]["hash"],
                     "reference_columns": view["files"]["references"]["columns"],
                     "rejected": m["rejected"], "draws": m["draws"],
                     "sample_digests": {"digest_hex": DIGEST_HEX, "per_line": PER_LINE, **digests}},
        "built_with": {"flowgauge_version": m["flowgauge_version"], "split_hash": m["split_hash"]},
    }
    if "train" in view:
        recipe["train"] = {"identity_hash": view["train"]["identity_hash"]}
    return json.loads(canonical_json(recipe))


def write_recipe(recipe: dict[str, Any], path: str | Path) -> Path:
    """Write ``recipe`` as canonical JSON (indented), atomically; checked against the schema first."""
    _check_recipe(json.loads(canonical_json(recipe)), str(path))
    path = Path(path)
    atomic_write_bytes(path, canonical_json(recipe, indent=1))
    return path


# -- reading and checking a recipe -----------------------------------------------------------

@lru_cache(maxsize=1)
def _validator():
    import jsonschema
    return jsonschema.Draft202012Validator(json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8")))


def _check_recipe(doc: Any, source: str) -> dict[str, Any]:
    errors = sorted(_validator().iter_errors(doc), key=lambda e: list(e.absolute_path))
    if errors:
        e = errors[0]
        pointer = "/" + "/".join(str(p) for p in e.absolute_path)
        raise InputError(f"recipe does not follow its schema: {clip_text(e.message, 300)}",
                         where=f"{source}: {pointer}")
    if doc["split"] not in SPLIT_NAMES:
        raise InputError(f"expected one of {', '.join(SPLIT_NAMES)}, got {clip_text(doc['split'], 40)!r}",
                         where=f"{source}: /split")
    sd = doc["expected"]["sample_digests"]
    for key in ("inputs", "references"):
        lines = sd[key]
        full = sd["per_line"] * sd["digest_hex"]
        for i, line in enumerate(lines):
            if len(line) != full and (i < len(lines) - 1 or len(line) % sd["digest_hex"]):
                raise InputError(f"expected {full} hex digits ({sd['per_line']} digests of {sd['digest_hex']})"
                                 f"{' or a whole number of digests on the last line' if i == len(lines) - 1 else ''}"
                                 f", got {len(line)}", where=f"{source}: /expected/sample_digests/{key}/{i}")
        count = sum(len(line) for line in lines) // sd["digest_hex"]
        if count != doc["samples"]:
            raise InputError(f"holds digests of {count} samples, the recipe has {doc['samples']}",
                             where=f"{source}: /expected/sample_digests/{key}")
    return doc


def read_recipe(path: str | Path) -> dict[str, Any]:
    """Read and check a recipe file; :class:`InputError` names the file and the JSON pointer."""
    where = str(path)
    data = read_input_bytes(path, expected="a split recipe", max_bytes=MAX_RECIPE_BYTES)
    try:
        doc = parse_json(data.decode("utf-8"), where=where)
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start})", where=where) from None
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON ({exc})", where=where) from None
    return _check_recipe(doc, where)


def _first_difference(want: Any, have: Any, pointer: str) -> tuple[str, Any, Any] | None:
    """The JSON pointer of the first difference between two JSON values (sorted key order)."""
    if isinstance(want, dict) and isinstance(have, dict):
        for key in sorted(set(want) | set(have)):
            d = _first_difference(want.get(key), have.get(key), f"{pointer}/{key}")
            if d is not None:
                return d
        return None
    if isinstance(want, list) and isinstance(have, list) and len(want) == len(have):
        for i, (a, b) in enumerate(zip(want, have)):
            d = _first_difference(a, b, f"{pointer}/{i}")
            if d is not None:
                return d
        return None
    return None if want == have else (pointer, want, have)


def _short(value: Any) -> str:
    return clip_text(json.dumps(value, sort_keys=True), 80)


class Expectation:
    """What a rebuild must reproduce; the builder calls its checks (``build_split(expect=)``)."""

    def __init__(self, recipe: dict[str, Any], source: str = "recipe"):
        self.recipe = recipe
        self.source = source
        sd = recipe["expected"]["sample_digests"]
        self.hex = sd["digest_hex"]
        self.digests = {key: _unpack(sd[key], self.hex) for key in ("inputs", "references")}
        self.files = {"inputs": "inputs.parquet", "references": "references.parquet"}
        self.made = "rebuilt"  # what the checked content is, in messages

    def check_plan(self, plan: dict[str, Any]) -> None:
        """Before anything is solved: network, split, design and its fitted parameters, seed,
        solver settings and acceptance as the recipe says."""
        r = self.recipe
        want = {"network": r["network"], "split": r["split"], "samples": r["samples"], "design": r["design"],
                "seed": r["seed"], "seed_rule": r["seed_rule"], "solver": r["solver"],
                "acceptance": r["acceptance"]}
        have = identity_view(plan)
        have.pop("train", None)
        diff = _first_difference(json.loads(canonical_json(want)), have, "")
        if diff is not None:
            pointer, a, b = diff
            raise IntegrityError(f"this build would differ from the recipe before any sample is solved: recipe "
                                 f"{_short(a)}, this flowgauge {_short(b)}", where=f"{self.source}: {pointer}")
        want_train = r.get("train", {}).get("identity_hash")
        have_train = plan.get("train", {}).get("identity_hash")
        if want_train != have_train:
            raise IntegrityError(
                "the training split differs from the one the recipe was written beside: recipe "
                f"{(want_train or 'none')[:16]}, given {(have_train or 'none')[:16]} (identity hashes)",
                where=f"{self.source}: /train/identity_hash")

    def check_chunk(self, start: int, stop: int, inputs, references) -> None:
        """Samples ``start`` .. ``stop - 1``: each one's row of each file against its digest."""
        got = {"inputs": sample_digests(table_columns(inputs), self.hex),
               "references": sample_digests(table_columns(references), self.hex)}
        for i, sample in enumerate(range(start, stop)):
            for key in ("inputs", "references"):
                want = self.digests[key][sample]
                if got[key][i] != want:
                    hint = ""
                    if key == "references":  # same inputs: the solver's arithmetic differs
                        from .._numerics import kernel_note
                        hint = ("; reference solutions can differ in their last digits on another CPU model "
                                "(docs/splits.md, \"How far it reproduces\")")
                        note = kernel_note()
                        hint += f"; {note}" if note else ""
                    raise IntegrityError(
                        f"the {self.made} {key} of sample {sample} differ from the recipe's (sample digest "
                        f"{want}, {self.made} {got[key][i]}); the first differing sample of samples "
                        f"{start}..{stop - 1}{hint}",
                        where=f"sample {sample} ({self.files[key]})")

    def check_manifest(self, manifest: dict[str, Any], folder: Path | None = None) -> None:
        """The finished split: file hashes, rejections, draws and identity hash."""
        e = self.recipe["expected"]
        columns = manifest["files"]["references"]["columns"]
        have = {"inputs_hash": manifest["files"]["inputs"]["hash"],
                "reference_columns": {k: v for k, v in columns.items() if k not in MEASURED_COLUMNS},
                "rejected": manifest["rejected"], "draws": manifest["draws"],
                "identity_hash": manifest.get("identity_hash") or compute_identity_hash(manifest)}
        kept = "" if folder is None else f"; the rebuilt split was not put in place, it is kept in {folder}"
        for key in ("inputs_hash", "reference_columns", "rejected", "draws", "identity_hash"):
            diff = _first_difference(e[key], have[key], f"/expected/{key}")
            if diff is not None:
                pointer, a, b = diff
                raise IntegrityError(f"recipe {_short(a)}, {self.made} {_short(b)}{kept}",
                                     where=f"{self.source}: {pointer}")


# -- building from a recipe ------------------------------------------------------------------

def _network_for(recipe: dict[str, Any], network: str | Path | None, source: str):
    info = recipe["network"]
    if network is None:
        if info["name"] not in bundled_names():
            raise InputError(f"network {clip_text(info['name'], 60)!r} is not bundled: give its file (--network)",
                             where=f"{source}: /network/name")
        net, where = load_network(info["name"]), f"bundled network {info['name']}"
    else:
        net, where = load_network(network), str(network)
    got = network_hash(net)
    if got != info["content_hash"]:
        raise IntegrityError(f"network content hash {got[:16]}... differs from the recipe's "
                             f"{info['content_hash'][:16]}...", where=where)
    return net


def build_from_recipe(recipe: str | Path | dict[str, Any], *, out: str | Path | None = None,
                      workers: int = 1, scheduler: str | None = None, network: str | Path | None = None,
                      train: str | Path | None = None, fresh: bool = False,
                      progress: Callable[[BuildProgress], None] | None = None) -> dict[str, Any]:
    """Rebuild the split a recipe describes into ``out`` (default ``<splits root>/<network>/<split>``)
    and return its manifest; :class:`IntegrityError` as soon as anything differs from the recipe.

    ``train``: for a test split, the training split to build beside (default the sibling folder
    ``train`` of ``out``); its identity hash must be the recipe's. ``network``: a network file,
    for a network that is not bundled.
    """
    from ._load import load_split, splits_root
    if isinstance(recipe, dict):
        source = "recipe"
        doc = _check_recipe(json.loads(canonical_json(recipe)), source)
    else:
        source = str(resolve_recipe(recipe))
        doc = read_recipe(source)
    out = Path(out) if out is not None else splits_root() / doc["network"]["name"] / doc["split"]
    net = _network_for(doc, network, source)
    train_split = False  # a recipe without a training split: never pick up a sibling one
    if "train" in doc:
        t_folder = Path(train) if train is not None else out.parent / "train"
        if not (t_folder / MANIFEST_FILE).exists():
            raise InputError("this test split is built beside a training split: build that first (from its own "
                             f"recipe, e.g. recipes/{doc['network']['name']}/train.json) or give --train",
                             where=str(t_folder))
        train_split = load_split(t_folder)
    return build_split(net, doc["split"], samples=doc["samples"], seed=doc["seed"], out=out, workers=workers,
                       scheduler=scheduler, chunk=doc["build"]["chunk"], notes=doc["notes"], progress=progress,
                       max_attempts=doc["build"]["max_attempts"], train=train_split, fresh=fresh,
                       expect=Expectation(doc, source))


def check_split_against_recipe(recipe: str | Path | dict[str, Any], folder: str | Path,
                               train: str | Path | None = None) -> str:
    """Check a built split against a recipe without rebuilding it: every sample's digests, the
    file hashes, rejections and identity hash. Returns the identity hash; :class:`IntegrityError`
    on a difference."""
    from ._load import resolve_split
    from ._verify import verify_split
    source = "recipe" if isinstance(recipe, dict) else str(resolve_recipe(recipe))
    doc = _check_recipe(recipe, source) if isinstance(recipe, dict) else read_recipe(source)
    folder = resolve_split(folder)
    verify_split(folder)
    m = json.loads((folder / MANIFEST_FILE).read_text(encoding="utf-8"))
    exp = Expectation(doc, source)
    exp.made = "checked"
    t_ident = None
    if "train" in m and "identity_hash" not in m["train"]:
        from ._load import load_split
        t_ident = train_identity(load_split(Path(train) if train else folder.parent / "train", references=False))
    tables = {key: read_table(folder / m["files"][key]["path"]) for key in ("inputs", "references")}
    if m["samples"] != doc["samples"]:
        raise IntegrityError(f"recipe {doc['samples']} samples, split {m['samples']}", where=f"{source}: /samples")
    exp.check_chunk(0, m["samples"], tables["inputs"], tables["references"])
    ident = m.get("identity_hash") or compute_identity_hash(m, t_ident)
    exp.check_manifest({**m, "identity_hash": ident})
    return ident
