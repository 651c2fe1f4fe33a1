"""A split whose samples run with elements out of service, made from an intact split: the same
loadings, per-sample ``branch_in_service`` / ``gen_in_service`` flags, and references solved
again on each sample's state network (the builder's AC-OPF and acceptance). The demo's
maintenance scenario is made this way (docs/networks.md)."""

from __future__ import annotations

import json
import os
import shutil
from collections import Counter
from pathlib import Path

import numpy as np

from .._io import canonical_json

__all__ = ["split_with_states"]


def _solve(net, branch, gen, pd, qd, sample_id):
    """References of the samples on their state networks: (columns, kept rows, rejected counts)."""
    from ..network import binding_in_state, group_states, network_in_state
    from ..opf import ACOPF, OPFSettings
    from ..opf._result import binding_signature
    from ..splits._worker import ACCEPTANCE, reject_reason

    ub, ug, group = group_states(branch, gen)
    results: dict[int, object] = {}
    rejected: Counter = Counter()
    for k in range(ub.shape[0]):
        rows = np.flatnonzero(group == k)
        state_net = network_in_state(net, ub[k], ug[k], sample=sample_id[rows[0]].item())
        solver = ACOPF(state_net, OPFSettings())
        for i in rows.tolist():
            res = solver.solve(pd[i], qd[i], start=None)
            reason = reject_reason(res, tuple(ACCEPTANCE.items()))
            if reason is None:
                results[i] = res
            else:
                rejected[reason] += 1
    kept = np.array(sorted(results), dtype=np.int64)
    res = [results[i] for i in kept.tolist()]

    def stack(attr):
        return np.stack([np.asarray(getattr(r, attr), float) for r in res])

    binding = [binding_in_state(r.binding, net, gen[i]) for r, i in zip(res, kept.tolist())]
    cols = {
        "pg_mw": stack("pg_mw"), "qg_mvar": stack("qg_mvar"), "vm_pu": stack("vm_pu"), "va_deg": stack("va_deg"),
        "objective_per_h": stack("objective"), "iterations": np.array([int(r.iterations) for r in res], np.int64),
        "max_p_mismatch_mw": stack("max_p_mismatch_mw"), "max_q_mismatch_mvar": stack("max_q_mismatch_mvar"),
        "max_limit_violation": stack("max_limit_violation"), "solve_seconds": stack("seconds"),
        "status": np.array([str(r.status) for r in res], dtype=str), "binding": binding,
        "signature": np.array([binding_signature(b) for b in binding], dtype=str),
    }
    return cols, kept, rejected


def split_with_states(source, out: str | Path, branch_in_service, gen_in_service, *, rows=None,
                      notes: str = "") -> dict:
    """Write a split at ``out`` with the loadings of ``source`` (a split folder or a loaded
    Split) in rows ``rows`` (default all), the states ``branch_in_service`` (S, n_branch) /
    ``gen_in_service`` (S, n_gen) bool (one row per row taken) and references solved on each
    state network. Samples whose AC-OPF fails or misses the acceptance tolerances on their state
    network are left out and counted in the manifest's ``rejected``; the samples kept are
    numbered 0 .. S-1 again, in order. The manifest has the format version of splits with
    states. The manifest keeps the
    source's design and seed, records ``notes``, and drops the link to a training split (the
    regimes of a state differ). Returns the manifest; ``out`` appears only when complete."""
    from ..errors import InputError
    from ..network import check_states
    from ..splits import load_split
    from ..splits._builder import _file_entry, _seconds_stats
    from ..splits._coverage import coverage
    from ..splits._manifest import STATE_FORMAT_VERSION, seal_manifest, write_manifest
    from ..splits._store import INPUTS_FILE, MANIFEST_FILE, REFERENCES_FILE, inputs_table, references_table, \
        write_table

    split = load_split(Path(source)) if isinstance(source, (str, os.PathLike)) else source
    net = split.network
    take = np.arange(split.n_samples) if rows is None else np.asarray(rows, np.int64)
    sid = np.asarray(split.sample_id)[take]
    branch, gen = check_states(net, branch_in_service, gen_in_service, sid)
    pd, qd = np.asarray(split.pd_mw, float)[take], np.asarray(split.qd_mvar, float)[take]
    cols, kept, rejected = _solve(net, branch, gen, pd, qd, sid)
    if kept.size == 0:
        raise InputError(f"no sample has a solution on its state network (rejected: {dict(rejected)})",
                         where=str(out))
    kind = None if split.kind is None else np.asarray(split.kind)[take][kept]
    # sample ids are 0 .. S-1 in a split: the samples kept are numbered again, in order
    sid, branch, gen = np.arange(kept.size, dtype=np.int64), branch[kept], gen[kept]
    t_in = inputs_table(sid, pd[kept], qd[kept], kind=kind, branch_in_service=branch, gen_in_service=gen)
    cols["margin"] = np.asarray(split.references.margin, float)[take][kept]
    t_ref = references_table(sid, cols)
    out = Path(out)
    stage = out.parent / f".{out.name}.partial"
    if stage.exists():
        shutil.rmtree(stage)
    stage.mkdir(parents=True)
    write_table(t_in, stage / INPUTS_FILE)
    write_table(t_ref, stage / REFERENCES_FILE)
    m = {k: v for k, v in split.manifest.items() if k not in ("split_hash", "identity_hash", "train")}
    rej = Counter(m.get("rejected", {}))
    rej.update({f"state: {k}": v for k, v in rejected.items()})
    m.update(format_version=STATE_FORMAT_VERSION, samples=int(sid.size), notes=notes,
             rejected=dict(sorted(rej.items())),
             draws=int(m.get("draws", sid.size)) + int(sum(rejected.values())),
             files={"inputs": _file_entry(INPUTS_FILE, t_in, False),
                    "references": _file_entry(REFERENCES_FILE, t_ref, True)},
             reference_solve_seconds=_seconds_stats(cols["solve_seconds"]),
             coverage=coverage(cols["signature"], cols["binding"], kind, None))
    if "file" in m["network"]:
        shutil.copyfile(split.path / m["network"]["file"], stage / m["network"]["file"])
    manifest = seal_manifest(m)
    write_manifest(stage / MANIFEST_FILE, manifest)
    if out.exists():
        shutil.rmtree(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    os.replace(stage, out)
    return json.loads(canonical_json(manifest))
