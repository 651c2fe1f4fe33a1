"""Building a split: draw loadings, solve their AC-OPF references in chunks (resumable), then
write the Parquet files and the manifest, and move the finished folder into place at once."""

from __future__ import annotations

import json
import os
import shutil
from collections import Counter
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np

from .. import __version__
from .._io import atomic_write_bytes, canonical_json, clip_text, hash_arrays
from ..errors import InputError, IntegrityError
from ..network import Network, bundled_names, load_network, write_network_json
from ._coverage import coverage
from ._designs import SEED_RULE, SPLIT_DESIGN, design_for
from ._executors import run_tasks
from ._manifest import (FORMAT_NAME, FORMAT_VERSION, SPLIT_NAMES, STATE_FORMAT_VERSION, network_hash, seal_manifest,
                        write_manifest)
from ._store import (BINDING_SEP, INPUTS_FILE, MANIFEST_FILE, REFERENCES_FILE, inputs_table,
                     references_table, solution_hash, table_columns, write_table)
from ._worker import MAX_ATTEMPTS, Job, job_for, read_chunk, solve_chunk, solver_settings, write_chunk

__all__ = ["BuildProgress", "build_split", "partial_dir", "train_identity", "DEFAULT_CHUNK"]

DEFAULT_CHUNK = 10


@dataclass(frozen=True)
class BuildProgress:
    """Passed to the progress callback after each finished chunk."""

    solved: int
    rejected: int
    total: int
    resumed: int  # samples taken from chunks of an earlier, interrupted run


def partial_dir(out: Path) -> Path:
    """Where an unfinished build keeps its chunks: a hidden sibling of the output folder."""
    return out.parent / f".{out.name}.partial"


def _chunk_ranges(samples: int, chunk: int) -> list[tuple[int, int]]:
    return [(s, min(s + chunk, samples)) for s in range(0, samples, chunk)]


def _fingerprint(job: Job, settings: dict, chunk: int) -> dict[str, Any]:
    out = {"network_hash": job.net_hash, "design": job.design.name, "stream": list(job.stream),
           "parameters": job.design.parameters(job.net), "seed": job.seed, "solver": settings,
           "acceptance": dict(job.acceptance), "max_attempts": job.max_attempts, "chunk": chunk,
           "flowgauge_version": __version__}
    if job.attempts is not None:  # chunks that took recorded draws hold no rejections
        out["draws_from_recipe"] = hash_arrays({"attempt": np.asarray(job.attempts, np.int64)})
    return out


def _differing_setting(have: Any, want: dict) -> str:
    """The first setting (in the fingerprint's key order) that differs, with both values."""
    if not isinstance(have, dict):
        return "the record of the earlier build (unreadable)"
    for key in want:
        if have.get(key) != want[key]:
            old, new = (clip_text(json.dumps(v, sort_keys=True), 80) for v in (have.get(key), want[key]))
            return f"{key} (earlier build: {old}; now: {new})"
    return "the record of the earlier build"


def _prepare_partial(part: Path, fingerprint: dict, fresh: bool = False) -> Path:
    """The chunk folder. Chunks of an interrupted build with other settings are never mixed in
    nor silently deleted: the build refuses, naming the setting, unless ``fresh``."""
    chunks = part / "chunks"
    stamp = part / "build.json"
    want = canonical_json(fingerprint, indent=1)
    if fresh and part.exists():
        shutil.rmtree(part)
    if stamp.exists() and stamp.read_bytes() != want:
        try:
            have = json.loads(stamp.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            have = None
        want_doc = json.loads(want)
        raise InputError(f"holds chunks of an interrupted build with another {_differing_setting(have, want_doc)}; "
                         "rerun with the same settings to resume, or with --fresh (fresh=True) to delete them "
                         "and start over", where=str(part))
    chunks.mkdir(parents=True, exist_ok=True)
    if not stamp.exists():
        atomic_write_bytes(stamp, want)
    return chunks


def _chunk_path(chunks: Path, start: int, stop: int) -> Path:
    return chunks / f"samples-{start:07d}-{stop:07d}.npz"


def _check_out(out: Path) -> None:
    if (out / MANIFEST_FILE).exists():
        raise InputError("already holds a finished split; remove it or choose another --out", where=str(out))
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise InputError("exists and is not an empty folder; choose another --out", where=str(out))


def _seconds_stats(sec: np.ndarray) -> dict[str, float]:
    return {"median": float(np.median(sec)), "mean": float(np.mean(sec)),
            "p90": float(np.percentile(sec, 90)), "max": float(np.max(sec)), "total": float(np.sum(sec))}


def _assemble(chunks: list[dict]) -> tuple[dict[str, np.ndarray], Counter]:
    rejected: Counter = Counter()
    for c in chunks:
        rejected.update(json.loads(str(c["rejected"])))
    keys = [k for k in chunks[0] if k != "rejected" and all(k in c for c in chunks)]
    return {k: np.concatenate([c[k] for c in chunks]) for k in keys}, rejected


def _file_entry(path: str, table, with_solution: bool) -> dict[str, Any]:
    cols = table_columns(table)
    entry = {"path": path, "hash": hash_arrays(cols),
             "columns": {name: hash_arrays({name: arr}) for name, arr in cols.items()}}
    if with_solution:
        entry["solution_hash"] = solution_hash(table)
    return entry


def _tables(sid: np.ndarray, data: dict, train_signatures) -> tuple:
    """The inputs and references tables of samples ``sid`` (a chunk or the whole split), and
    per sample whether its regime occurs in the training split (None without one)."""
    # the per-sample state columns, when the design gives each sample one (single-outage designs;
    # bus shunt flags: the year design with capacitor switching)
    t_in = inputs_table(sid, data["pd_mw"], data["qd_mvar"], kind=data.get("kind"),
                        branch_in_service=data.get("branch_in_service"), gen_in_service=data.get("gen_in_service"),
                        shunt_in_service=data.get("shunt_in_service"))
    ref_cols = dict(data)
    ref_cols["binding"] = [tuple(b.split(BINDING_SEP)) if b else () for b in data["binding"].tolist()]
    seen = None
    if train_signatures is not None:
        seen = np.isin(data["signature"].astype(str), train_signatures)
        ref_cols["regime_seen_in_train"] = seen.astype(np.int64)
    return t_in, references_table(sid, ref_cols), seen, ref_cols["binding"]


def _train_signatures(train):
    return None if train is None or train.references is None else train.references.signature.astype(str)


def train_identity(train) -> str:
    """The identity hash of a training split (a loaded Split): recorded in its manifest, or
    computed from it for manifests written before recipes."""
    from ._manifest import compute_identity_hash
    return train.manifest.get("identity_hash") or compute_identity_hash(train.manifest)


def _finish(out: Path, part: Path, net: Network, job: Job, split: str, samples: int,
            data: dict, rejected: Counter, settings: dict, notes: str, train=None, expect=None,
            attempts_out: list | None = None) -> dict[str, Any]:
    stage = part / "final"
    if stage.exists():
        shutil.rmtree(stage)
    stage.mkdir(parents=True)
    sid = data["slot"]
    if not np.array_equal(sid, np.arange(samples)):
        raise RuntimeError("chunks do not cover the samples exactly")  # a bug, not a user error
    has_states = "branch_in_service" in data
    if has_states:  # every kept state is one the network allows (the worker solved on it)
        from ..network import check_states
        check_states(net, data["branch_in_service"], data["gen_in_service"], sid,
                     shunt_in_service=data.get("shunt_in_service"))
    t_in, t_ref, seen, binding = _tables(sid, data, _train_signatures(train))
    write_table(t_in, stage / INPUTS_FILE)
    write_table(t_ref, stage / REFERENCES_FILE)
    network_info = {"name": net.name, "content_hash": job.net_hash}
    if net.name not in bundled_names() or network_hash(load_network(net.name)) != job.net_hash:
        write_network_json(net, stage / "network.json")
        network_info["file"] = "network.json"
    manifest = seal_manifest({
        "format": FORMAT_NAME, "format_version": STATE_FORMAT_VERSION if has_states else FORMAT_VERSION,
        "network": network_info,
        "split": split, "design": {"name": job.design.name, "parameters": job.design.parameters(net)},
        "seed": job.seed, "seed_rule": SEED_RULE, "samples": samples,
        "elements": {"bus_id": net.bus_id.tolist(), "gen_id": net.gen_id.tolist(),
                     "load_id": net.load_id.tolist(), "branch_id": net.branch_id.tolist()},
        "flowgauge_version": __version__, "solver": settings, "acceptance": dict(job.acceptance),
        "files": {"inputs": _file_entry(INPUTS_FILE, t_in, False),
                  "references": _file_entry(REFERENCES_FILE, t_ref, True)},
        "rejected": dict(sorted(rejected.items())), "draws": samples + int(sum(rejected.values())),
        "reference_solve_seconds": _seconds_stats(data["solve_seconds"]), "notes": notes,
        "coverage": coverage(data["signature"], binding, data.get("kind"), seen),
        **({} if seen is None else {"train": {"split_hash": train.split_hash, "identity_hash": train_identity(train),
                                              "regimes": int(np.unique(train.references.signature).size)}}),
    })
    written = json.loads(canonical_json(manifest))  # as written: floats rounded
    if expect is not None:
        expect.check_manifest(written, stage)  # a split that differs from its recipe is not put in place
    write_manifest(stage / MANIFEST_FILE, manifest)
    if out.exists():
        out.rmdir()  # checked empty before the build
    out.parent.mkdir(parents=True, exist_ok=True)
    os.replace(stage, out)
    shutil.rmtree(part)
    if attempts_out is not None and "attempt" in data:
        attempts_out[:] = [int(a) for a in data["attempt"]]
    return written


def build_split(network: str | Path | Network, split: str, *, samples: int, seed: int, out: str | Path,
                workers: int = 1, scheduler: str | None = None, chunk: int = DEFAULT_CHUNK,
                notes: str = "", progress: Callable[[BuildProgress], None] | None = None,
                max_attempts: int = MAX_ATTEMPTS, train=None, fresh: bool = False,
                expect=None, pilot: dict | None = None, replay: dict | None = None,
                attempts_out: list | None = None) -> dict[str, Any]:
    """Build one split into the folder ``out`` and return its manifest.

    Finished chunks are kept in a hidden sibling folder of ``out``; a rerun with the same
    settings resumes from them, a rerun with other settings refuses (naming the setting) unless
    ``fresh``, which deletes them first. ``out`` appears only when everything is written.
    ``train``: the training split (a folder or a loaded Split; default the sibling folder
    ``train`` of ``out`` when it holds a finished split; False: none, even if a sibling
    exists). Test splits record, per sample, whether its regime occurs in it, and the
    out-of-distribution design draws unseen regimes from it.

    ``expect``: what the build must reproduce (a recipe's :class:`~flowgauge.splits._recipe.Expectation`).
    Its ``check_plan(plan)`` runs once the design is fitted, before any sample is solved;
    ``check_chunk(start, stop, inputs_table, references_table)`` on every chunk, resumed or
    new, before it is kept; ``check_manifest(manifest, folder)`` before the split is put in
    place. Each raises :class:`IntegrityError` on a difference.

    ``pilot``: the spanning design's fitted pilot as a recipe keeps it, used instead of solving
    one (:meth:`~flowgauge.splits._spanning.Spanning.pilot_record`).

    ``replay``: a recipe's record of the draws: ``attempts`` (per sample, the draw it was built
    from), ``rejected`` and ``draws``. Each sample then takes its recorded draw alone (a draw
    rejected here is an :class:`IntegrityError` naming the sample) and the manifest records
    the recipe's rejections, which are not solved again. ``attempts_out``: a list filled with
    each sample's draw once the split is in place.
    """
    if split not in SPLIT_NAMES:
        raise InputError(f"expected one of {', '.join(SPLIT_NAMES)}, got {split!r}", where="split")
    for name, value, low in (("samples", samples, 1), ("workers", workers, 1), ("chunk", chunk, 1), ("seed", seed, 0)):
        if isinstance(value, bool) or not isinstance(value, int) or value < low:
            raise InputError(f"expected an integer >= {low}, got {value!r}", where=name)
    net = network if isinstance(network, Network) else load_network(network)
    out = Path(out)
    _check_out(out)
    train = _train_split(split, out, train)
    part = partial_dir(out)
    if fresh and part.exists():
        shutil.rmtree(part)
    existed = part.exists()
    try:
        # the spanning design's pilot draws run where the chunks will, and the fitted pilot is
        # kept beside the chunks, so that a resumed build does not solve it again
        part.mkdir(parents=True, exist_ok=True)
        design = design_for(split, net, train, run=lambda fn, tasks: run_tasks(fn, tasks, workers=workers,
                                                                                scheduler=scheduler), store=part,
                            pilot=pilot)
        job = job_for(net, split, design, seed, max_attempts,
                      attempts=None if replay is None else tuple(int(a) for a in replay["attempts"]))
        settings = solver_settings()
        if expect is not None:
            expect.check_plan(_plan(net, job, split, samples, settings, train))
        chunks_dir = _prepare_partial(part, _fingerprint(job, settings, chunk))
    except BaseException:
        if not existed:  # this run kept nothing to resume from: leave no trace
            shutil.rmtree(part, ignore_errors=True)
        raise
    ranges = _chunk_ranges(samples, chunk)
    done = {r: read_chunk(_chunk_path(chunks_dir, *r)) for r in ranges if _chunk_path(chunks_dir, *r).exists()}
    signatures = _train_signatures(train)
    check = (lambda a, b, result: None) if expect is None else (
        lambda a, b, result: expect.check_chunk(a, b, *_tables(result["slot"], result, signatures)[:2]))
    for (a, b), result in sorted(done.items()):
        check(a, b, result)
    solved = sum(r[1] - r[0] for r in done)
    n_rej = sum(sum(json.loads(str(c["rejected"])).values()) for c in done.values())
    resumed = solved
    todo = [(job, a, b) for (a, b) in ranges if (a, b) not in done]
    differs: tuple[int, IntegrityError] | None = None  # the earliest chunk found to differ
    try:
        if progress:
            progress(BuildProgress(solved, n_rej, samples, resumed))
        for (_, a, b), result in run_tasks(solve_chunk, todo, workers=workers, scheduler=scheduler):
            try:
                check(a, b, result)  # before it is kept: a differing chunk is never resumed from
            except IntegrityError as exc:
                if differs is None or a < differs[0]:
                    differs = (a, exc)
            else:
                write_chunk(_chunk_path(chunks_dir, a, b), result)
                done[(a, b)] = result
                solved += b - a
                n_rej += sum(json.loads(str(result["rejected"])).values())
                if progress:
                    progress(BuildProgress(solved, n_rej, samples, resumed))
            # chunks finish out of order on several workers: wait for the ones before the
            # differing chunk, so that the error names the first differing sample of the split
            if differs is not None and all(r in done for r in ranges if r[0] < differs[0]):
                raise differs[1]
        if differs is not None:
            raise differs[1]
    except BaseException:
        if not done:  # nothing to resume from: leave no trace
            shutil.rmtree(part, ignore_errors=True)
        raise
    data, rejected = _assemble([done[r] for r in ranges])
    if replay is not None:  # the recorded draws were taken alone: the rejections are the recipe's
        rejected = Counter(replay["rejected"])
    return _finish(out, part, net, job, split, samples, data, rejected, settings, notes, train, expect,
                   attempts_out)


def _plan(net: Network, job: Job, split: str, samples: int, settings: dict, train) -> dict[str, Any]:
    """What the build is about to do, in the manifest's terms (for a recipe's check)."""
    plan = {"network": {"name": net.name, "content_hash": job.net_hash}, "split": split, "samples": samples,
            "design": {"name": job.design.name, "parameters": job.design.parameters(net)},
            "seed": job.seed, "seed_rule": SEED_RULE, "solver": settings, "acceptance": dict(job.acceptance)}
    if _train_signatures(train) is not None:
        plan["train"] = {"split_hash": train.split_hash, "identity_hash": train_identity(train)}
    return json.loads(canonical_json(plan))


def _train_split(split: str, out: Path, train):
    """The training split a test split refers to (None for training splits or when absent)."""
    if not split.startswith("test-") or train is False:  # False: build without one
        return None
    from ._load import load_split
    if train is None:
        sibling = out.parent / "train"
        if not (sibling / MANIFEST_FILE).exists():
            if SPLIT_DESIGN[split] == "outside":
                raise InputError("the out-of-distribution design draws regimes that never occur in the "
                                 "training split: build train first beside this split, or give --train",
                                 where=str(out))
            return None
        train = sibling
    return train if hasattr(train, "references") else load_split(Path(train))
