"""The work of one chunk of samples, run in a worker process (local or Dask).

Each sample slot tries draws (attempt 0, 1, ...) until one gives a loading whose AC-OPF
reference is accepted; every rejected draw is counted by reason. A rebuild from a recipe that
records each sample's accepted draw takes that draw alone (``Job.attempts``), and
:func:`match_chunk` finds those draws for a built split without solving any AC-OPF. A draw with a state (one
element out, the single-outage design) is solved on the network of that state
(:func:`flowgauge.network.network_in_state`), one AC-OPF object per distinct state and process,
and its binding limits are recorded without the labels of generators out
(:func:`flowgauge.network.binding_in_state`).
"""

from __future__ import annotations

import io
import json
from collections import Counter, OrderedDict
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from .._io import atomic_write_bytes
from ..errors import InputError, IntegrityError
from ..network import Network
from ._designs import Loading, draw_stream, sample_rng
from ._manifest import network_hash
from ._store import BINDING_SEP

__all__ = ["Job", "ACCEPTANCE", "MAX_ATTEMPTS", "solver_settings", "make_tools", "solve_chunk", "match_chunk",
           "write_chunk", "read_chunk", "reject_reason", "MATCH_TOLERANCE"]

# A reference is kept only if converged and every residual / violation is at most this.
ACCEPTANCE = {"max_p_mismatch_mw": 1e-3, "max_q_mismatch_mvar": 1e-3, "max_limit_violation": 1e-3}
MAX_ATTEMPTS = 25
# A drawn loading is a built sample's draw when its loads are within this share of the
# sample's (sum of absolute values; another CPU changes their last digits) and its states equal.
MATCH_TOLERANCE = 1e-5


@dataclass(frozen=True)
class Job:
    """Everything a worker needs; picklable. ``net_hash`` keys the per-process solver cache."""

    net: Network
    net_hash: str
    design: Any
    seed: int
    acceptance: tuple  # ((name, tolerance), ...)
    max_attempts: int = MAX_ATTEMPTS
    stream: tuple = ()  # the split's stream of draws (_designs.draw_stream)
    attempts: tuple | None = None  # per sample slot, the draw to take (a recipe's; -1 or None: draw in turn)


def job_for(net: Network, split: str, design, seed: int, max_attempts: int,
            attempts: tuple | None = None) -> Job:
    """The job that draws ``split`` with ``design`` as a build does: the split's own stream of
    draws and the build's acceptance tolerances."""
    return Job(net=net, net_hash=network_hash(net), design=design, seed=seed,
               acceptance=tuple(sorted(ACCEPTANCE.items())), max_attempts=max_attempts,
               stream=draw_stream(split, design.name), attempts=attempts)


# AC-OPF objects of states kept per process (least recently used dropped): a state's object
# is built once and reused for every later sample of that state.
STATE_SOLVERS = 64


class _Tools:
    """The AC-OPF solver and the maximum loadability of one network, built once per process."""

    def __init__(self, net: Network):
        from ..opf import ACOPF, OPFSettings
        self.net = net
        self.settings = OPFSettings()
        self.solver = ACOPF(net, self.settings)
        self._states: OrderedDict = OrderedDict()

    def solve(self, pd_mw: np.ndarray, qd_mvar: np.ndarray):
        return self.solver.solve(pd_mw, qd_mvar, start=None)

    def state_solver(self, branch_in_service: np.ndarray, gen_in_service: np.ndarray, shunt_in_service=None):
        """The AC-OPF of the network in this state, cached by the state's bytes."""
        from ..network import network_in_state
        from ..opf import ACOPF
        br = np.ascontiguousarray(branch_in_service, bool)
        gen = np.ascontiguousarray(gen_in_service, bool)
        shunt = None if shunt_in_service is None else np.ascontiguousarray(shunt_in_service, bool)
        key = br.tobytes() + b"|" + gen.tobytes() + (b"" if shunt is None else b"|" + shunt.tobytes())
        if key in self._states:
            self._states.move_to_end(key)
            return self._states[key]
        solver = ACOPF(network_in_state(self.net, br, gen, shunt_in_service=shunt), self.settings)
        self._states[key] = solver
        if len(self._states) > STATE_SOLVERS:
            self._states.popitem(last=False)
        return solver

    def solve_in_state(self, pd_mw: np.ndarray, qd_mvar: np.ndarray, branch_in_service: np.ndarray,
                       gen_in_service: np.ndarray, shunt_in_service=None):
        """The AC-OPF of the loading on the network in this state; binding labels (and the
        signature) without those of generators out."""
        from ..network import binding_in_state
        from ..opf._result import binding_signature
        res = self.state_solver(branch_in_service, gen_in_service, shunt_in_service).solve(pd_mw, qd_mvar, start=None)
        binding = binding_in_state(res.binding, self.net, gen_in_service)
        return replace(res, binding=binding, signature=binding_signature(binding))

    def max_loadability(self, pd_mw, qd_mvar, dir_pd_mw, dir_qd_mvar, *, allow_negative: bool = False) -> float | str:
        """``lam`` of the maximum loadability, or a rejection reason; ``lam <= 0`` is rejected
        unless ``allow_negative`` (a start point beyond the limit, scaled back)."""
        from ..opf import max_loadability
        lr = max_loadability(self.net, pd_mw, qd_mvar, dir_pd_mw, dir_qd_mvar, self.settings)
        if lr.status != "converged" or not np.isfinite(lr.lam) or (lr.lam <= 0 and not allow_negative):
            return f"loadability-{lr.status}" if lr.status != "converged" else "loadability-not-positive"
        return float(lr.lam)


def solver_settings() -> dict[str, Any]:
    """The AC-OPF settings every reference is solved with (recorded in the manifest)."""
    from ..opf import OPFSettings
    return OPFSettings().to_dict()


_TOOLS: dict[str, Any] = {}


def make_tools(net: Network, net_hash: str):
    if net_hash not in _TOOLS:
        _TOOLS[net_hash] = _Tools(net)
    return _TOOLS[net_hash]


def reject_reason(res, acceptance: tuple) -> str | None:
    """None if the solution is accepted, else the reason (one of a fixed set of names)."""
    if res.status != "converged":
        return f"opf-{res.status}"
    for name, tol in acceptance:
        if not float(getattr(res, name)) <= tol:
            return f"{name}-above-tolerance"
    return None


def _draw(job: Job, tools, slot: int, attempt: int) -> Loading | str:
    rng = sample_rng(job.seed, slot, attempt, job.stream)
    if getattr(job.design, "uses_attempt", False):  # designs whose redraws change with the attempt
        return job.design.draw(job.net, rng, tools, slot=slot, attempt=attempt)
    if getattr(job.design, "uses_slot", False):  # designs that vary their kind by slot
        return job.design.draw(job.net, rng, tools, slot=slot)
    return job.design.draw(job.net, rng, tools)


def _solve_slot(job: Job, tools, slot: int, rejected: Counter) -> tuple[Loading, Any, int]:
    recorded = getattr(job, "attempts", None)
    if recorded is not None and int(recorded[slot]) < 0:  # a draw the recipe could not name: in turn
        recorded = None
    tries = range(job.max_attempts) if recorded is None else (int(recorded[slot]),)
    for attempt in tries:
        loading = _draw(job, tools, slot, attempt)
        if isinstance(loading, str):
            if recorded is not None:
                raise _replay_error(slot, attempt, loading)
            rejected[f"{loading}"] += 1
            continue
        if loading.branch_in_service is not None or loading.shunt_in_service is not None:
            from ..network import intact_state
            br0, gen0 = intact_state(job.net)
            res = tools.solve_in_state(loading.pd_mw, loading.qd_mvar,
                                       br0 if loading.branch_in_service is None else loading.branch_in_service,
                                       gen0 if loading.gen_in_service is None else loading.gen_in_service,
                                       loading.shunt_in_service)
        else:
            res = tools.solve(loading.pd_mw, loading.qd_mvar)
        reason = reject_reason(res, job.acceptance)
        if reason is None and hasattr(job.design, "check"):
            reason = job.design.check(loading, res)
        if reason is None:
            return loading, res, attempt
        if recorded is not None:
            raise _replay_error(slot, attempt, reason)
        rejected[f"{loading.kind}: {reason}" if loading.kind else reason] += 1
    counts = ", ".join(f"{k}: {v}" for k, v in sorted(rejected.items()))
    raise InputError(f"{job.max_attempts} draws in a row were rejected for design {job.design.name!r} on "
                     f"network {job.net.name!r} (rejected so far: {counts})", where=f"sample {slot}")


def _replay_error(slot: int, attempt: int, reason: str) -> IntegrityError:
    return IntegrityError(f"the draw the recipe keeps for this sample (attempt {attempt}) is rejected on this "
                          f"machine ({reason}): its acceptance tips on this machine's arithmetic",
                          where=f"sample {slot}")


def solve_chunk(job: Job, start: int, stop: int) -> dict[str, np.ndarray]:
    """Samples ``start`` .. ``stop - 1``: inputs, references, each sample's accepted draw
    (``attempt``) and the rejected draws, as arrays."""
    tools = make_tools(job.net, job.net_hash)
    rejected: Counter = Counter()
    rows = [_solve_slot(job, tools, slot, rejected) for slot in range(start, stop)]
    loads, res = [r[0] for r in rows], [r[1] for r in rows]
    def stack(attr):
        return np.stack([np.asarray(getattr(r, attr), float) for r in res])
    state = {}
    if getattr(job.design, "has_states", False):  # per-sample flags only for designs with states
        from ..network import intact_state
        br0, gen0 = intact_state(job.net)
        state = {"branch_in_service": np.stack([br0 if l.branch_in_service is None else
                                                np.asarray(l.branch_in_service, bool) for l in loads]),
                 "gen_in_service": np.stack([gen0 if l.gen_in_service is None else
                                             np.asarray(l.gen_in_service, bool) for l in loads])}
        if getattr(job.design, "has_shunt_states", False):  # and bus shunt flags for designs that switch them
            state["shunt_in_service"] = np.stack([np.ones(job.net.n_bus, bool) if l.shunt_in_service is None else
                                                  np.asarray(l.shunt_in_service, bool) for l in loads])
    return {
        "slot": np.arange(start, stop, dtype=np.int64),
        "pd_mw": np.stack([l.pd_mw for l in loads]), "qd_mvar": np.stack([l.qd_mvar for l in loads]),
        "margin": np.array([l.margin for l in loads], float),
        "kind": np.array([l.kind or job.design.name for l in loads], dtype=str),
        "pg_mw": stack("pg_mw"), "qg_mvar": stack("qg_mvar"), "vm_pu": stack("vm_pu"), "va_deg": stack("va_deg"),
        "objective_per_h": stack("objective"), "iterations": np.array([int(r.iterations) for r in res], np.int64),
        "max_p_mismatch_mw": stack("max_p_mismatch_mw"), "max_q_mismatch_mvar": stack("max_q_mismatch_mvar"),
        "max_limit_violation": stack("max_limit_violation"), "solve_seconds": stack("seconds"),
        "status": np.array([str(r.status) for r in res], dtype=str),
        "binding": np.array([BINDING_SEP.join(r.binding) for r in res], dtype=str),
        "signature": np.array([str(r.signature) for r in res], dtype=str),
        "rejected": np.array(json.dumps(dict(sorted(rejected.items())))),
        "attempt": np.array([r[2] for r in rows], np.int64),
        **state,
    }


def _flags(net: Network, loading: Loading) -> dict[str, np.ndarray]:
    """A loading's per-sample state flags as the split stores them (None: the intact state)."""
    from ..network import intact_state
    br0, gen0 = intact_state(net)
    return {"branch_in_service": br0 if loading.branch_in_service is None else np.asarray(loading.branch_in_service, bool),
            "gen_in_service": gen0 if loading.gen_in_service is None else np.asarray(loading.gen_in_service, bool),
            "shunt_in_service": np.ones(net.n_bus, bool) if loading.shunt_in_service is None
            else np.asarray(loading.shunt_in_service, bool)}


def _same_draw(net: Network, loading: Loading, pd_mw, qd_mvar, states: dict) -> bool:
    for got, want in ((loading.pd_mw, pd_mw), (loading.qd_mvar, qd_mvar)):
        if not float(np.sum(np.abs(np.asarray(got) - want))) <= MATCH_TOLERANCE * float(np.sum(np.abs(want))):
            return False
    if states:
        flags = _flags(net, loading)
        return all(np.array_equal(flags[name], want) for name, want in states.items())
    return True


def match_chunk(job: Job, start: int, stop: int, pd_mw: np.ndarray, qd_mvar: np.ndarray,
                states: dict) -> np.ndarray:
    """For samples ``start`` .. ``stop - 1`` of a built split (their loads ``pd_mw``,
    ``qd_mvar`` and the per-sample state flags it stores, ``states``: name -> rows), the draw (attempt)
    each was built from: the first whose loading is the sample's, drawn again without solving
    any AC-OPF (a spanning draw solves its loadability); -1 where none of ``max_attempts`` is."""
    tools = make_tools(job.net, job.net_hash)
    found = np.full(stop - start, -1, np.int64)
    for row, slot in enumerate(range(start, stop)):
        row_states = {k: v[row] for k, v in states.items()}
        for attempt in range(job.max_attempts):
            loading = _draw(job, tools, slot, attempt)
            if not isinstance(loading, str) and _same_draw(job.net, loading, pd_mw[row], qd_mvar[row], row_states):
                found[row] = attempt
                break
    return found


def write_chunk(path: Path, chunk: dict[str, np.ndarray]) -> None:
    buf = io.BytesIO()
    np.savez(buf, **chunk)
    atomic_write_bytes(path, buf.getvalue())


def read_chunk(path: Path) -> dict[str, np.ndarray]:
    with np.load(path, allow_pickle=False) as z:
        return {k: z[k] for k in z.files}
