"""Validation: a predictions file against its schema and against the split it answers."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._format import (
    DEFAULT_MAX_BYTES, GEN_PLAUSIBLE_FACTOR, VA_PLAUSIBLE_DEG, VM_PLAUSIBLE_PU, Problem, Problems,
    format_problems,
)
from ._predictions import Predictions, read_predictions

__all__ = ["ValidationReport", "validate_predictions", "check_predictions", "resolve_split"]


@dataclass(frozen=True, eq=False)
class ValidationReport:
    """The outcome of a validation.

    ``errors``: the first problems found (at most 1000), each with ``where`` (JSON pointer or
    Parquet column and row), ``sample_id`` and ``message``; ``n_errors``: how many in all.
    ``predictions``: the loaded arrays (None when the file could not be read);
    ``split``: the split checked against (None when it could not be found).
    """

    path: Path | None
    errors: tuple[Problem, ...]
    n_errors: int
    predictions: Predictions | None
    split: object | None

    @property
    def valid(self) -> bool:
        return self.n_errors == 0

    def message(self, limit: int = 20) -> str:
        """Plain text: up to ``limit`` errors, one per line, then "... and N more errors"."""
        return format_problems(self.errors, self.n_errors, limit)


def validate_predictions(source: str | os.PathLike | Predictions, split=None, *,
                         max_bytes: int = DEFAULT_MAX_BYTES) -> ValidationReport:
    """Check a predictions file (or loaded :class:`Predictions`) against the schema and split.

    ``split``: a loaded split, a split folder, or None to find the split by the hash in the
    file's header. Problems in the file become the report's errors; a file that cannot be
    read at all (missing, over ``max_bytes``, not JSON or Parquet, unknown format or version)
    raises :class:`InputError`.
    """
    if isinstance(source, Predictions):
        predictions, problems, path = source, Problems(), source.path
    else:
        path = Path(source)
        predictions, problems = read_predictions(path, max_bytes=max_bytes)
    loaded = None
    if predictions is not None:
        loaded = resolve_split(predictions.header["split"], split, problems)
        if loaded is not None:
            check_against_split(predictions, loaded, problems)
    return ValidationReport(path, tuple(problems.kept), problems.count, predictions, loaded)


def check_predictions(source: str | os.PathLike | Predictions, split=None, *,
                      max_bytes: int = DEFAULT_MAX_BYTES) -> ValidationReport:
    """:func:`validate_predictions`, raising :class:`InputError` (up to 20 errors, then the
    count) unless the predictions are valid, then the split's files checked against their
    manifest (:func:`~flowgauge.splits.verify_split`: IntegrityError on any difference).
    Returns the report: ``.predictions``, ``.split``."""
    report = validate_predictions(source, split, max_bytes=max_bytes)
    if not report.valid:
        raise InputError(report.message(), where=str(report.path) if report.path else "predictions")
    path = getattr(report.split, "path", None) if report.split is not None else None
    if path is not None and (Path(path) / "manifest.json").is_file():
        # the split files read must be what their manifest records, as `splits verify` checks
        # them (IntegrityError, exit 3, naming the file and column); a split built in memory
        # has no files to check
        from ..splits import verify_split
        verify_split(path)
    return report


def resolve_split(header_split: dict, split, problems: Problems):
    """The split the predictions answer: ``split`` if given (a loaded split or a folder),
    else the known split with the header's hash. Mismatches become problems."""
    want = header_split["split_hash"]
    if split is None:
        from ..splits import find_split, load_split
        try:
            split = load_split(find_split(want), references=False)
        except InputError:
            from ..splits import splits_root
            problems.add("/split/split_hash", f"unknown split hash {want}: no split under {splits_root()} "
                         "has it; name the split with --split FOLDER or NETWORK/SPLIT")
            return None
    elif not hasattr(split, "sample_id"):
        from ..splits import load_split
        split = load_split(split, references=False)
    if split.split_hash != want:
        problems.add("/split/split_hash", f"the file answers split {want} but was checked against "
                     f"split {split.split_hash} ({_network_name(split)}/{_split_name(split)})")
        return None
    for key, have in (("network", _network_name(split)), ("split", _split_name(split))):
        if header_split[key] != have:
            problems.add(f"/split/{key}", f"{header_split[key]!r} does not match the manifest "
                         f"of split {want[:12]}..., which says {have!r}")
    return split


def _network_name(split) -> str:
    net = split.manifest.get("network") if isinstance(split.manifest, dict) else None
    return str(net["name"]) if isinstance(net, dict) and "name" in net else str(split.network.name)


def _split_name(split) -> str:
    return str(split.manifest.get("split", split.name)) if isinstance(split.manifest, dict) else str(split.name)


def check_against_split(pred: Predictions, split, problems: Problems) -> None:
    """Sample ids, array widths, finite and plausible values."""
    _check_ids(pred, np.asarray(split.sample_id, dtype=np.int64), problems)
    n = {"bus": len(split.bus_id), "gen": len(split.gen_id)}
    widths_ok = True
    for field, kind in (("pg_mw", "gen"), ("vm_pu", "bus"), ("va_deg", "bus"), ("qg_mvar", "gen")):
        a = getattr(pred, field)
        if a is not None and a.shape[1] != n[kind]:
            widths_ok = False
            noun = "buses (bus_id order)" if kind == "bus" else "generators (gen_id order)"
            problems.add(pred.where(field, 0), f"has {a.shape[1]} numbers per sample; the split's "
                         f"network has {n[kind]} {noun}", pred.sample_id[0])
    for field in pred.fields:
        _check_finite(pred, field, problems)
    _check_vm(pred, problems)
    if pred.va_deg is not None:
        _flag(pred, "va_deg", np.isfinite(pred.va_deg) & (np.abs(pred.va_deg) > VA_PLAUSIBLE_DEG),
              lambda v: f"{v:g} degrees is outside [-{VA_PLAUSIBLE_DEG:g}, {VA_PLAUSIBLE_DEG:g}]: "
              "not an angle in degrees?", problems)
    if widths_ok:
        _check_gen_scale(pred, split.network, np.asarray(split.gen_id), problems)


def _check_ids(pred: Predictions, expected: np.ndarray, problems: Problems) -> None:
    ids = pred.sample_id  # sorted
    dup = np.zeros(len(ids), dtype=bool)
    dup[1:] = ids[1:] == ids[:-1]
    for k in np.flatnonzero(dup):
        first = int(np.searchsorted(ids, ids[k]))
        problems.add(pred.where("sample_id", k),
                     f"sample id {ids[k]} appears more than once (first at {pred.where('sample_id', first)})",
                     ids[k])
    extra = ~np.isin(ids, expected)
    for k in np.flatnonzero(extra):
        problems.add(pred.where("sample_id", k), f"sample id {ids[k]} is not in the split", ids[k])
    missing = np.setdiff1d(expected, ids)
    if missing.size:
        shown = ", ".join(str(i) for i in missing[:10]) + (", ..." if missing.size > 10 else "")
        problems.add({"json": "/samples", "parquet": "column sample_id"}.get(pred.format, "sample_id"),
                     f"{missing.size} of the split's {expected.size} sample ids "
                     f"{'is' if missing.size == 1 else 'are'} missing: {shown}")


def _flag(pred: Predictions, field: str, bad: np.ndarray, message, problems: Problems) -> None:
    """Record each flagged item of ``field`` (shape (S, width) mask) with its location."""
    ks, items = np.nonzero(bad)
    a = getattr(pred, field)
    problems.add_counted(len(ks), (
        Problem(pred.where(field, k, j), message(a[k, j]), int(pred.sample_id[k]))
        for k, j in zip(ks.tolist(), items.tolist())))


def _check_finite(pred: Predictions, field: str, problems: Problems) -> None:
    def message(v):
        name = "NaN" if np.isnan(v) else ("Infinity" if v > 0 else "-Infinity")
        return f"{name} is not a number; every value must be finite"
    _flag(pred, field, ~np.isfinite(getattr(pred, field)), message, problems)


def _check_vm(pred: Predictions, problems: Problems) -> None:
    vm = pred.vm_pu
    lo, hi = VM_PLAUSIBLE_PU
    _flag(pred, "vm_pu", vm <= 0, lambda v: f"voltage magnitude {v:g} p.u. is "
          f"{'negative' if v < 0 else 'zero'}; it must be positive", problems)
    _flag(pred, "vm_pu", (vm > 0) & np.isfinite(vm) & ((vm < lo) | (vm > hi)),
          lambda v: f"{v:g} p.u. is outside [{lo:g}, {hi:g}]: a value in kV, or a scaling slip?",
          problems)


def _check_gen_scale(pred: Predictions, net, gen_id: np.ndarray, problems: Problems) -> None:
    sorter = np.argsort(net.gen_id)
    pos = sorter[np.clip(np.searchsorted(net.gen_id, gen_id, sorter=sorter), 0, len(sorter) - 1)]
    if not np.array_equal(net.gen_id[pos], gen_id):
        return  # the manifest's generators are not the network's: nothing to compare with
    for field, low, high, unit, small in (("pg_mw", net.pmin_mw, net.pmax_mw, "MW", "kW"),
                                           ("qg_mvar", net.qmin_mvar, net.qmax_mvar, "MVAr", "kVAr")):
        a = getattr(pred, field)
        if a is None:
            continue
        low, high = np.asarray(low)[pos], np.asarray(high)[pos]
        limit = GEN_PLAUSIBLE_FACTOR * np.fmax(np.fmax(np.abs(low), np.abs(high)), net.base_mva)
        limit = np.where(np.isfinite(limit), limit, np.inf)
        _flag(pred, field, np.isfinite(a) & (np.abs(a) > limit),
              lambda v: f"{v:g} {unit} is over {GEN_PLAUSIBLE_FACTOR:g} times this generator's "
              f"limits (or the base power): a value in {small}?", problems)
