"""Recipes: a split described by what rebuilds it and by the hashes the rebuild must reproduce.

A recipe (``recipes/<network>/<split>.json``, schema ``schema/recipe.schema.json``) records the
network's content hash, the split, its design and fitted parameters, seed, sample count,
chunking, solver settings and acceptance, and the expected result: the identity hash, the
inputs hash, the solution hash, the rejected draws and, per sample, a short digest of its row
of each file, and a sketch of it for another CPU: its discrete content's digest and a few
projections of each floating-point column. :func:`recipe_from_split` writes one from a built
split; :func:`build_from_recipe` rebuilds the split and checks it as it goes: the design before
anything is solved, every chunk before it is kept (naming the first sample that differs and the
file), the manifest before the split is put in place. Any difference raises
:class:`IntegrityError` (exit 3), except that, unless the check is exact, a sample whose digest
differs passes when its discrete content is the same and its floating-point columns agree with
the sketch to within the solver's tolerance (:class:`Agreement` counts such samples): another
CPU model changes the solver's last digits, and now and then its path to another point within
its tolerances.
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any, Callable

import numpy as np

from .._io import atomic_write_bytes, canonical_json, clip_text, hash_arrays, parse_json, read_input_bytes
from ..errors import InputError, IntegrityError
from ..network import bundled_names, load_network
from ._builder import DEFAULT_CHUNK, BuildProgress, build_split, train_identity
from ._designs import SEED_RULE
from ._manifest import MEASURED_COLUMNS, SPLIT_NAMES, compute_identity_hash, identity_view, network_hash
from ._store import MANIFEST_FILE, read_table, table_columns

__all__ = ["RECIPE_FORMAT", "RECIPE_VERSION", "RECIPE_SCHEMA_PATH", "Expectation", "recipe_from_split",
           "write_recipe", "read_recipe", "build_from_recipe", "check_split_against_recipe",
           "recipes_root", "resolve_recipe", "sample_digests", "sample_sketches", "Agreement",
           "RECIPE_MAX_ATTEMPTS", "SKETCH_TOLERANCE", "SKETCH_TOLERANCES"]

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
# Sketches: per sample and floating-point column, its row's projections on fixed random sign
# vectors, compared as a share of the row's size (the sum of its absolute values). Another CPU
# changes a few stored values by a unit in their 10th digit (1e-11 to 1e-9 of a row), and in
# some samples takes the solver to another point within its tolerances (docs/splits.md,
# "Rebuilding elsewhere"; measured: the cost by up to 1.2e-7, the voltage angles by 1.3e-5 and
# the reactive outputs by 9.3e-5 of their row at an unchanged cost: reactive dispatch costs
# nothing and is flat at the optimum). So the optimal cost, which is unique, and the loads,
# which a draw fixes, are held close, the point to 1e-4 and the reactive outputs to 1e-3.
SKETCH_PROJECTIONS = 2
SKETCH_TOLERANCES = {"objective_per_h": 1e-6, "pd_mw": 1e-5, "qd_mvar": 1e-5, "margin": 1e-5, "qg_mvar": 1e-3}
SKETCH_TOLERANCE = 1e-4  # every other floating-point column (voltages, angles, active outputs)
# Solver diagnostics that another CPU may change without changing the solution: left out of
# the discrete digest (the exact digests still cover them).
NOISE_SENSITIVE = ("iterations",)


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


def _float_rows(a: np.ndarray) -> np.ndarray:
    return a.reshape(len(a), -1)


# Columns whose entries are summed per group before they are sketched: generator outputs per
# bus. Several generators at one bus can share its output in any proportion at the optimum (for
# reactive power always: it costs nothing), and another CPU takes another share (measured on
# demo: 0.43 MVAr moved between two generators of a bus); the bus's total is unique.
SKETCH_GROUPS = {"pg_mw": "generator bus", "qg_mvar": "generator bus"}


def sketch_groups(net) -> dict[str, np.ndarray]:
    """Per grouped column (:data:`SKETCH_GROUPS`), each entry's group on ``net``."""
    return {name: np.asarray(net.gen_bus_idx, np.int64) for name in SKETCH_GROUPS}


def _sign_vectors(name: str, length: int, count: int, group: np.ndarray | None = None) -> np.ndarray:
    """``count`` fixed vectors of +-1 of ``length``, the same on every machine for a column name;
    with ``group`` (each entry's group), one sign per group: entries of a group share it."""
    if group is None:
        seed = int.from_bytes(hashlib.sha256(f"sketch|{name}|{length}".encode("utf-8")).digest()[:8], "little")
        return np.random.default_rng(seed).integers(0, 2, size=(count, length)).astype(np.float64) * 2.0 - 1.0
    groups = int(group.max()) + 1 if group.size else 0
    seed = int.from_bytes(hashlib.sha256(f"sketch|{name}|{groups}|grouped".encode("utf-8")).digest()[:8], "little")
    signs = np.random.default_rng(seed).integers(0, 2, size=(count, groups)).astype(np.float64) * 2.0 - 1.0
    return signs[:, group]


def _sketched(columns: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The floating-point columns a sketch covers (not the measured ones)."""
    return {k: v for k, v in columns.items() if k not in MEASURED_COLUMNS and np.asarray(v).dtype.kind == "f"}


def sample_sketches(columns: dict[str, np.ndarray], projections: int = SKETCH_PROJECTIONS,
                    hex_digits: int = DIGEST_HEX, groups: dict[str, np.ndarray] | None = None
                    ) -> tuple[list[str], dict[str, np.ndarray]]:
    """Per row: the digest of its discrete content (the columns that are not floating point and
    the positions of missing values in those that are; measured columns and the iteration count
    left out), and per floating-point column the row's projections, shape (rows, projections);
    a column in ``groups`` (each entry's group, :func:`sketch_groups`) is projected on signs
    shared within each group, so that what moves inside a group cancels."""
    floats = _sketched(columns)
    discrete = {k: v for k, v in columns.items()
                if k not in floats and k not in MEASURED_COLUMNS and k not in NOISE_SENSITIVE}
    discrete.update({f"{k}|missing": np.isnan(v) for k, v in floats.items()})
    n = len(next(iter(columns.values())))
    digests = [hash_arrays({k: v[i:i + 1] for k, v in discrete.items()})[:hex_digits] for i in range(n)]
    proj = {}
    for name, a in sorted(floats.items()):
        x = np.nan_to_num(_float_rows(np.asarray(a, dtype=np.float64)), nan=0.0)
        group = None if groups is None else groups.get(name)
        if group is not None and group.size != x.shape[1]:
            raise IntegrityError(f"column {name} has {x.shape[1]} entries, the network {group.size}",
                                 where=f"column {name}")
        proj[name] = x @ _sign_vectors(name, x.shape[1], projections, group).T
    return digests, proj


def _row_sizes(columns: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Per floating-point column, each row's sum of absolute values (missing values as 0)."""
    return {k: np.nansum(np.abs(_float_rows(np.asarray(v, dtype=np.float64))), axis=1)
            for k, v in _sketched(columns).items()}


def _pack_floats(values: np.ndarray, per_line: int = PER_LINE) -> list[str]:
    raw = np.ascontiguousarray(values, dtype="<f8")
    return [base64.b64encode(raw[i:i + per_line].tobytes()).decode("ascii") for i in range(0, len(raw), per_line)]


def _unpack_floats(lines: list[str], projections: int, where: str) -> np.ndarray:
    try:
        raw = b"".join(base64.b64decode(line, validate=True) for line in lines)
    except ValueError:
        raise InputError("expected base64 text", where=where) from None
    if len(raw) % (8 * projections):
        raise InputError(f"expected whole samples of {projections} float64 values, got {len(raw)} bytes",
                         where=where)
    return np.frombuffer(raw, dtype="<f8").reshape(-1, projections)


def _pack(digests: list[str], per_line: int = PER_LINE) -> list[str]:
    return ["".join(digests[i:i + per_line]) for i in range(0, len(digests), per_line)]


def _unpack(lines: list[str], hex_digits: int) -> list[str]:
    text = "".join(lines)
    return [text[i:i + hex_digits] for i in range(0, len(text), hex_digits)]


# -- writing a recipe from a built split -----------------------------------------------------

def pilot_hash_in(parameters: dict[str, Any]) -> str | None:
    """The spanning pilot's hash in a design's parameters (at the top or one level down, as
    the outside and single-outage designs nest the spanning design's), or None."""
    if "pilot_hash" in parameters:
        return parameters["pilot_hash"]
    for value in parameters.values():
        if isinstance(value, dict) and "pilot_hash" in value:
            return value["pilot_hash"]
    return None


def _fitted_pilot(net, pilot_hash: str, workers: int) -> dict[str, Any] | None:
    """The spanning pilot of ``net`` as a recipe keeps it, if the pilot solved here (or kept by
    this process) has ``pilot_hash``; else None."""
    from ._executors import run_tasks
    from ._spanning import Spanning
    design = Spanning().fitted(net, run=lambda fn, tasks: run_tasks(fn, tasks, workers=workers))
    if design.pilot_summary()["pilot_hash"] != pilot_hash:
        return None
    return design.pilot_record(net)


def _found_attempts(folder: Path, m: dict[str, Any], net, pilot: dict[str, Any] | None, max_attempts: int,
                    train, workers: int) -> list[int] | None:
    """Each sample's draw (attempt) in the split at ``folder``, found by drawing again without
    solving (:func:`._worker.match_chunk`); -1 for a sample whose draw is not among the first
    ``max_attempts`` here (its draw tips on this machine's arithmetic, or the design drawn here
    is not the one it was built with); None if no sample's is found."""
    from ._designs import design_for
    from ._executors import run_tasks
    from ._load import load_split
    from ._worker import job_for, match_chunk
    sp = load_split(folder, references=False)
    t = None
    if m["split"].startswith("test-"):
        t_folder = Path(train) if train is not None else folder.parent / "train"
        t = load_split(t_folder) if (t_folder / MANIFEST_FILE).exists() else None
    design = design_for(m["split"], net, t, run=lambda fn, tasks: run_tasks(fn, tasks, workers=workers),
                        pilot=pilot)
    job = job_for(net, m["split"], design, m["seed"], max_attempts)
    states = {name: getattr(sp, name) for name in ("branch_in_service", "gen_in_service", "shunt_in_service")
              if getattr(sp, name) is not None}
    n, step = sp.n_samples, DEFAULT_CHUNK
    tasks = [(job, a, min(a + step, n), sp.pd_mw[a:a + step], sp.qd_mvar[a:a + step],
              {k: v[a:a + step] for k, v in states.items()}) for a in range(0, n, step)]
    found = np.full(n, -1, np.int64)
    for task, result in run_tasks(match_chunk, tasks, workers=workers):
        found[task[1]:task[2]] = result
    return None if (found < 0).all() else [int(a) for a in found]


def recipe_from_split(folder: str | Path, *, chunk: int = DEFAULT_CHUNK, max_attempts: int = RECIPE_MAX_ATTEMPTS,
                      train: str | Path | None = None, pilot: bool | None = None, workers: int = 1,
                      attempts: list[int] | None | bool = None) -> dict[str, Any]:
    """The recipe of the split in ``folder`` (verified first; its references must be present).

    ``train``: the training split a test split was built beside (default: the sibling folder
    ``train``), needed only for manifests written before recipes, which name it by
    ``split_hash`` alone.

    ``pilot``: for the designs with a spanning pilot, whether the recipe keeps the fitted pilot
    (so that a rebuild does not solve it again, on a machine where it could come out otherwise).
    The pilot is solved here (``workers`` processes; a pilot this process already solved is
    reused) and kept if its hash is the split's. None: keep it if so, else leave it out; True:
    :class:`InputError` if it differs; False: leave it out.

    ``attempts``: each sample's draw, kept in the recipe (``expected/sample_attempts``) so that
    a rebuild takes it alone: a list (as the build reported it, ``build_split(attempts_out=)``),
    None to find them by drawing again without solving (left out if a sample's draw is not
    found, as when the pilot could not be kept), or False to leave them out.
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
    from ._load import split_network
    net = split_network(m, folder)  # once: the sketches' groups, the pilot and the draws use it
    groups = sketch_groups(net)
    digests, sketches = {}, {}
    for key in ("inputs", "references"):
        cols = table_columns(read_table(folder / m["files"][key]["path"]))
        digests[key] = _pack(sample_digests(cols))
        discrete, proj = sample_sketches(cols, groups=groups)
        sketches[key] = {"discrete": _pack(discrete), "columns": {k: _pack_floats(v) for k, v in proj.items()}}
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
                     "sample_digests": {"digest_hex": DIGEST_HEX, "per_line": PER_LINE, **digests},
                     "sample_sketches": {"projections": SKETCH_PROJECTIONS, "grouped": dict(SKETCH_GROUPS),
                                         "relative_tolerance": {name: SKETCH_TOLERANCES.get(name, SKETCH_TOLERANCE)
                                                                for key in ("inputs", "references")
                                                                for name in sketches[key]["columns"]},
                                         "digest_hex": DIGEST_HEX, "per_line": PER_LINE, **sketches}},
        "built_with": {"flowgauge_version": m["flowgauge_version"], "split_hash": m["split_hash"]},
    }
    if "train" in view:
        recipe["train"] = {"identity_hash": view["train"]["identity_hash"]}
    pilot_hash = pilot_hash_in(m["design"]["parameters"])
    if pilot_hash is not None and pilot is not False:
        kept = _fitted_pilot(net, pilot_hash, workers)
        if kept is not None:
            recipe["pilot"] = kept
        elif pilot:
            raise InputError(f"the spanning pilot solved here differs from the one the split was built with "
                             f"(pilot_hash {pilot_hash[:16]}...): write the recipe where the split was built, or "
                             f"without its pilot", where=str(folder / MANIFEST_FILE))
    if attempts is None and (pilot_hash is None or "pilot" in recipe):
        attempts = _found_attempts(folder, m, net, recipe.get("pilot"), max_attempts, train, workers)
    if attempts:
        if len(attempts) != m["samples"] or min(attempts) < -1 or max(attempts) >= max_attempts:
            raise InputError(f"expected {m['samples']} draw numbers from 0 to {max_attempts - 1} (-1: not known)",
                             where="attempts")
        recipe["expected"]["sample_attempts"] = [int(a) for a in attempts]
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
    attempts = doc["expected"].get("sample_attempts")
    if attempts is not None and (len(attempts) != doc["samples"] or max(attempts, default=0) >= doc["build"]["max_attempts"]
                                 or min(attempts, default=0) < -1):
        raise InputError(f"expected {doc['samples']} draw numbers from -1 (not known) to below build/max_attempts "
                         f"({doc['build']['max_attempts']}), got {len(attempts)} from {min(attempts, default=0)} "
                         f"to {max(attempts, default=0)}",
                         where=f"{source}: /expected/sample_attempts")
    pilot = doc.get("pilot")
    if pilot is not None:
        slots, draws = pilot["slots"], pilot["draws"]
        if not slots or len(slots) != len(pilot["regimes"]):
            raise InputError(f"expected one regime per kept slot and at least one slot, got {len(slots)} slots and "
                             f"{len(pilot['regimes'])} regimes", where=f"{source}: /pilot")
        if any(b <= a for a, b in zip(slots, slots[1:])) or slots[-1] >= draws:
            raise InputError(f"expected increasing slots below draws ({draws})", where=f"{source}: /pilot/slots")
    sk = doc["expected"].get("sample_sketches")
    for key in ("inputs", "references") if sk else ():
        pointer = f"{source}: /expected/sample_sketches/{key}"
        count = sum(len(line) for line in sk[key]["discrete"])
        if count != doc["samples"] * sk["digest_hex"]:
            raise InputError(f"expected {doc['samples']} digests of {sk['digest_hex']} hex digits, got "
                             f"{count} digits", where=f"{pointer}/discrete")
        for name, lines in sk[key]["columns"].items():
            if name not in sk["relative_tolerance"]:
                raise InputError(f"no tolerance for column {clip_text(name, 60)!r}",
                                 where=f"{source}: /expected/sample_sketches/relative_tolerance")
            got = len(_unpack_floats(lines, sk["projections"], f"{pointer}/columns/{name}"))
            if got != doc["samples"]:
                raise InputError(f"holds projections of {got} samples, the recipe has {doc['samples']}",
                                 where=f"{pointer}/columns/{name}")
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


def _drop_pilot_hash(parameters: dict[str, Any]) -> None:
    """Remove the pilot hash from a design's parameters (where :func:`pilot_hash_in` finds it)."""
    parameters.pop("pilot_hash", None)
    for value in parameters.values():
        if isinstance(value, dict):
            value.pop("pilot_hash", None)


def _short(value: Any) -> str:
    return clip_text(json.dumps(value, sort_keys=True), 80)


@dataclass
class Agreement:
    """How a rebuilt (or checked) split agrees with its recipe: samples not in ``within`` have the
    recipe's digests; ``within`` samples (their numbers) differ by no more than the solver's
    tolerance, at most ``largest`` of a row's size; ``train``: the training split it was built
    beside agreed with its own recipe only to within tolerance."""
    samples: int = 0
    within: set = field(default_factory=set)
    largest: float = 0.0
    train: bool = False
    recorded_draws: bool = False

    @property
    def identical(self) -> bool:
        return not self.within and not self.train

    def describe(self) -> str:
        if not self.within:
            text = f"{self.samples} samples reproduce the recipe, bit for bit"
        else:
            text = (f"{self.samples} samples reproduce the recipe: {self.samples - len(self.within)} bit for bit, "
                    f"{len(self.within)} to within tolerance (largest difference {self.largest:.1e} of a row's size)")
        if self.train:
            text += "; built beside a training split that reproduces its recipe to within tolerance"
        if self.recorded_draws:
            text += "; each from the draw the recipe records (its rejected draws not solved again)"
        if not self.identical:
            text += " (another CPU model; docs/splits.md, \"How far it reproduces\")"
        return text


class Expectation:
    """What a rebuild must reproduce; the builder calls its checks (``build_split(expect=)``).

    ``exact``: every sample bit for bit. Otherwise a sample whose digest differs passes when
    its discrete content is the recipe's and its floating-point columns agree with the recipe's
    sketches to within tolerance (recipes without sketches are always exact); the file hashes and
    the identity hash are then not compared, the rejections and draws still are."""

    def __init__(self, recipe: dict[str, Any], source: str = "recipe", exact: bool = False,
                 groups: dict[str, np.ndarray] | None = None):
        self.recipe = recipe
        self.source = source
        sd = recipe["expected"]["sample_digests"]
        self.hex = sd["digest_hex"]
        self.digests = {key: _unpack(sd[key], self.hex) for key in ("inputs", "references")}
        self.files = {"inputs": "inputs.parquet", "references": "references.parquet"}
        self.made = "rebuilt"  # what the checked content is, in messages
        sk = recipe["expected"].get("sample_sketches")
        self.sketch = None if exact or not sk else {
            "tol": sk["relative_tolerance"], "hex": sk["digest_hex"], "projections": sk["projections"],
            **{key: {"discrete": _unpack(sk[key]["discrete"], sk["digest_hex"]),
                     "columns": {k: _unpack_floats(v, sk["projections"], source) for k, v in sk[key]["columns"].items()}}
               for key in ("inputs", "references")}}
        self.exact = exact
        # the grouped columns' groups (:func:`sketch_groups` of the network), where the recipe's
        # sketches were grouped
        self.groups = None
        if self.sketch is not None and sk.get("grouped"):
            if groups is None or set(sk["grouped"]) - set(groups):
                raise InputError("the sketches sum columns per group; give the network's groups",
                                 where=f"{source}: /expected/sample_sketches/grouped")
            self.groups = {name: groups[name] for name in sk["grouped"]}
        self.agreement = Agreement(samples=recipe["samples"])
        self.train_within = None  # identity hash of a training split that agrees with its recipe within tolerance

    def check_plan(self, plan: dict[str, Any]) -> None:
        """Before anything is solved: network, split, design and its fitted parameters, seed,
        solver settings and acceptance as the recipe says. The design's pilot, when the recipe
        keeps it, has the recipe's slots and regimes by construction; the directions drawn again
        from its slots can differ in their last bits under other vector code (numpy's ``exp``
        and ``log``), which changes its hash but not what it steers to: unless exact, its hash
        is not compared (its draw and regime counts are; the samples are checked one by one)."""
        r = self.recipe
        want = {"network": r["network"], "split": r["split"], "samples": r["samples"], "design": r["design"],
                "seed": r["seed"], "seed_rule": r["seed_rule"], "solver": r["solver"],
                "acceptance": r["acceptance"]}
        want = json.loads(canonical_json(want))
        have = identity_view(plan)
        have.pop("train", None)
        if not self.exact and "pilot" in r:
            for doc in (want, have):
                _drop_pilot_hash(doc["design"]["parameters"])
        diff = _first_difference(want, have, "")
        if diff is not None:
            pointer, a, b = diff
            raise IntegrityError(f"this build would differ from the recipe before any sample is solved: recipe "
                                 f"{_short(a)}, this flowgauge {_short(b)}", where=f"{self.source}: {pointer}")
        want_train = r.get("train", {}).get("identity_hash")
        have_train = plan.get("train", {}).get("identity_hash")
        if want_train is not None and have_train is not None and have_train == self.train_within:
            self.agreement.train = True
        elif want_train != have_train:
            raise IntegrityError(
                "the training split differs from the one the recipe was written beside: recipe "
                f"{(want_train or 'none')[:16]}, given {(have_train or 'none')[:16]} (identity hashes)",
                where=f"{self.source}: /train/identity_hash")

    def check_chunk(self, start: int, stop: int, inputs, references) -> None:
        """Samples ``start`` .. ``stop - 1``: each one's row of each file against its digest."""
        cols = {"inputs": table_columns(inputs), "references": table_columns(references)}
        got = {key: sample_digests(c, self.hex) for key, c in cols.items()}
        sketched = {}  # per file: the chunk's sketches, computed when a digest first differs
        for i, sample in enumerate(range(start, stop)):
            for key in ("inputs", "references"):
                want = self.digests[key][sample]
                if got[key][i] == want:
                    continue
                if self.sketch is not None:
                    if key not in sketched:
                        sketched[key] = (*sample_sketches(cols[key], self.sketch["projections"], self.sketch["hex"],
                                                          self.groups), _row_sizes(cols[key]))
                    self._within_tolerance(key, sample, i, *sketched[key])
                    continue
                hint = ""
                if key == "references":  # same inputs: the solver's arithmetic differs
                    from .._numerics import kernel_note
                    hint = ("; reference solutions can differ in their last digits on another CPU model "
                            "(docs/splits.md, \"How far it reproduces\")")
                    note = kernel_note()
                    hint += f"; {note}" if note else ""
                if not self.exact:
                    hint += "; this recipe has no sketches to tell numerical noise from a real difference, so only a " \
                            "bit-for-bit rebuild passes"
                raise IntegrityError(
                    f"the {self.made} {key} of sample {sample} differ from the recipe's (sample digest "
                    f"{want}, {self.made} {got[key][i]}); the first differing sample of samples "
                    f"{start}..{stop - 1}{hint}",
                    where=f"sample {sample} ({self.files[key]})")

    def _within_tolerance(self, key: str, sample: int, row: int, discrete: list[str],
                         proj: dict[str, np.ndarray], sizes: dict[str, np.ndarray]) -> None:
        """Sample ``sample`` (row ``row`` of the chunk), whose digest differs: pass it if only
        floating-point values differ, by no more than the tolerance; else :class:`IntegrityError`
        naming the sample, file and column."""
        sk, where = self.sketch[key], f"sample {sample} ({self.files[key]})"
        lead = f"the {self.made} {key} of sample {sample} differ from the recipe's"
        if discrete[row] != sk["discrete"][sample] or set(proj) != set(sk["columns"]):
            raise IntegrityError(f"{lead} in content that is compared exactly (the columns that are not "
                                 f"floating point, such as status, binding limits and regime, or where values "
                                 f"are missing)", where=where)
        for name in sorted(proj):
            diff = float(np.max(np.abs(proj[name][row] - sk["columns"][name][sample])))
            tol = self.sketch["tol"][name]
            allowed = tol * float(sizes[name][row]) + 1e-300
            if not diff <= allowed:  # NaN fails too
                share = diff / allowed * tol
                hint = ""
                if key == "inputs" and share > 1e-3:  # not a nearby point: another draw
                    hint = ("; another draw was kept for this sample: a draw whose acceptance (a converged "
                            "optimal power flow) tips on this machine's arithmetic")
                raise IntegrityError(f"{lead} beyond tolerance: column {name} differs by {diff:.3g} in its "
                                     f"projections, {share:.1e} of the row's size (the tolerance is "
                                     f"{tol:.0e}){hint}", where=where)
            size = float(sizes[name][row])
            self.agreement.largest = max(self.agreement.largest, diff / size if size > 0 else 0.0)
        self.agreement.within.add(sample)

    def check_manifest(self, manifest: dict[str, Any], folder: Path | None = None) -> None:
        """The finished split: file hashes, rejections, draws and identity hash."""
        e = self.recipe["expected"]
        columns = manifest["files"]["references"]["columns"]
        have = {"inputs_hash": manifest["files"]["inputs"]["hash"],
                "reference_columns": {k: v for k, v in columns.items() if k not in MEASURED_COLUMNS},
                "rejected": manifest["rejected"], "draws": manifest["draws"],
                "identity_hash": manifest.get("identity_hash") or compute_identity_hash(manifest)}
        kept = "" if folder is None else f"; the rebuilt split was not put in place, it is kept in {folder}"
        # samples that differ within tolerance change the file hashes and the identity hash: the
        # per-sample checks stand for them; the rejections and draws must still be the recipe's
        keys = ("inputs_hash", "reference_columns", "rejected", "draws", "identity_hash") \
            if self.agreement.identical else ("rejected", "draws")
        for key in keys:
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
                      progress: Callable[[BuildProgress], None] | None = None, exact: bool = False,
                      agreement: Agreement | None = None) -> dict[str, Any]:
    """Rebuild the split a recipe describes into ``out`` (default ``<splits root>/<network>/<split>``)
    and return its manifest; :class:`IntegrityError` as soon as anything differs from the recipe
    by more than the solver's tolerance (by anything with ``exact``; see :class:`Expectation`).

    ``train``: for a test split, the training split to build beside (default the sibling folder
    ``train`` of ``out``); its identity hash must be the recipe's, or, unless ``exact``, it must
    agree to within tolerance with the training recipe beside this one (``train.json`` in the
    same folder, whose identity hash is the one this recipe names). ``network``: a network file,
    for a network that is not bundled. ``agreement``: filled with how the split agrees.
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
    expect = Expectation(doc, source, exact=exact, groups=sketch_groups(net))
    if "train" in doc and not exact:
        expect.train_within = _train_within_tolerance(doc, source, train_split)
    e = doc["expected"]
    replay = None
    if not exact and "sample_attempts" in e:  # each sample's recorded draw alone
        replay = {"attempts": e["sample_attempts"], "rejected": e["rejected"], "draws": e["draws"]}
        expect.agreement.recorded_draws = True
    manifest = build_split(net, doc["split"], samples=doc["samples"], seed=doc["seed"], out=out, workers=workers,
                           scheduler=scheduler, chunk=doc["build"]["chunk"], notes=doc["notes"], progress=progress,
                           max_attempts=doc["build"]["max_attempts"], train=train_split, fresh=fresh, expect=expect,
                           pilot=doc.get("pilot"), replay=replay)
    if agreement is not None:
        agreement.__dict__.update(expect.agreement.__dict__)
    return manifest


def _train_within_tolerance(doc: dict[str, Any], source: str, train_split) -> str | None:
    """The identity hash of ``train_split`` if it differs from the one ``doc`` names but agrees to
    within tolerance with the training recipe beside ``doc`` (whose identity hash ``doc`` names)."""
    from ._builder import train_identity
    want = doc["train"]["identity_hash"]
    have = train_identity(train_split)
    sibling = (Path(source).parent if source != "recipe" else recipes_root() / doc["network"]["name"]) / "train.json"
    if have == want or not sibling.is_file():
        return None
    t_doc = read_recipe(sibling)
    if t_doc["expected"]["identity_hash"] != want:
        return None
    check_split_against_recipe(t_doc, train_split.path)  # IntegrityError names the differing sample
    return have


def check_split_against_recipe(recipe: str | Path | dict[str, Any], folder: str | Path,
                               train: str | Path | None = None, exact: bool = False,
                               agreement: Agreement | None = None) -> str:
    """Check a built split against a recipe without rebuilding it: every sample's digests (or,
    unless ``exact``, its sketch, where the digest differs), the file hashes, rejections and identity
    hash. Returns the identity hash; :class:`IntegrityError` on a difference. ``agreement``:
    filled with how the split agrees."""
    from ._load import resolve_split
    from ._verify import verify_split
    source = "recipe" if isinstance(recipe, dict) else str(resolve_recipe(recipe))
    doc = _check_recipe(recipe, source) if isinstance(recipe, dict) else read_recipe(source)
    folder = resolve_split(folder)
    verify_split(folder)
    m = json.loads((folder / MANIFEST_FILE).read_text(encoding="utf-8"))
    from ._load import split_network
    exp = Expectation(doc, source, exact=exact, groups=sketch_groups(split_network(m, folder)))
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
    if agreement is not None:
        agreement.__dict__.update(exp.agreement.__dict__)
    return ident
