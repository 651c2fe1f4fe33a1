"""What the spanning draws' maximum-loadability solves cost, run by run, and what running the
fallback dispatch weight first would save.

    python benchmarks/loadability_weights.py [NETWORK/SPLIT[:N] ...] [--samples N] [--quick]
        [--out benchmarks/results/loadability_weights.json]

Default splits (the committed results): ieee118/train:300 activsg200/train:300
pegase1354/test-id:30 activsg2000/test-id:8, about 15 minutes on 2 cores. A test split is drawn
beside its training split, which must be on disk (for the large systems, rebuild it first:
flowgauge splits rebuild pegase1354/train). --quick:
ieee118/train:50 activsg200/train:30, under a minute.

A draw's loadability solve (flowgauge.opf.max_loadability) runs the default dispatch weight
and, if that does not converge, once more with the weight times FALLBACK_WEIGHT_FACTOR; the
fallback run's outcome is the draw's. The problem's feasible set does not depend on the
weight, so a draw could be rejected after a fallback run that ends ``infeasible`` without its
default run. That leaves every split the same except where the default weight converges on a
draw for which the fallback weight ends ``infeasible``. This benchmark counts those cases.

For the first N samples (``--samples`` unless given after the split) of each committed split whose recipe records each sample's
draw (recipes/<network>/<split>.json, ``expected.sample_attempts``), it draws every attempt up
to the recorded one again, as the build did (the rejected draws before it and the kept draw;
no AC-OPF), timing every loadability run; where the default weight converges, it also runs the
fallback weight on the same problem (not part of the build; timed apart). Reported per split:
draws, how the default runs ended, how many fallback runs ended ``infeasible`` where the default
converged (``changed``: the draws the reordering would change), and the seconds of loadability
runs the build spends now (``seconds_now``) against the seconds it would spend with the
fallback weight first (``seconds_fallback_first``), both from the same runs.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)

from flowgauge import __version__
from flowgauge._io import atomic_write_bytes, canonical_json
from flowgauge.errors import InputError

ROOT = Path(__file__).resolve().parents[1]
FULL = ["ieee118/train:300", "activsg200/train:300", "pegase1354/test-id:30", "activsg2000/test-id:8"]
QUICK = ["ieee118/train:50", "activsg200/train:30"]


def measure(spec: str, samples: int) -> dict:
    import flowgauge.opf._loadability as lmod
    from flowgauge.network import load_network
    from flowgauge.splits import load_split, recipes_root, splits_root
    from flowgauge.splits._designs import design_for
    from flowgauge.splits._worker import _draw, job_for, make_tools

    network, split = spec.split("/")
    path = recipes_root() / network / f"{split}.json"
    if not path.is_file():
        raise InputError("no committed recipe for this split", where=f"recipes/{network}/{split}.json")
    recipe = json.loads(path.read_text(encoding="utf-8"))
    attempts = recipe["expected"].get("sample_attempts")
    if attempts is None or min(attempts) < 0:
        raise InputError("the recipe does not record every sample's draw", where=f"recipes/{network}/{split}.json")
    net = load_network(network)
    train = None
    if split.startswith("test-"):
        t_folder = splits_root() / network / "train"
        if not (t_folder / "manifest.json").is_file():
            raise InputError(f"a test split is drawn beside its training split, which is not on disk: rebuild it "
                             f"first (flowgauge splits rebuild {network}/train)", where=str(t_folder))
        train = load_split(t_folder)
    design = design_for(split, net, train, pilot=recipe.get("pilot"))
    job = job_for(net, split, design, recipe["seed"], recipe["build"]["max_attempts"])
    tools = make_tools(net, job.net_hash)

    runs: list[tuple[float, str, int, float]] = []  # (weight, status, iterations, seconds): one draw's runs
    extra: list[tuple[str, int, float]] = []        # the fallback run added where the default converged
    original = lmod.interior_point
    default_w = tools.settings.loadability_dispatch_weight
    fallback_w = lmod.FALLBACK_WEIGHT_FACTOR * default_w

    def timed(model, x0, st):
        t0 = time.perf_counter()
        out = original(model, x0, st)
        runs.append((model.dispatch_weight, out.status, out.iterations, time.perf_counter() - t0))
        if model.dispatch_weight == default_w and out.status == "converged":
            other = lmod.ACModel(model.net, loadability=True, dispatch_weight=fallback_w)
            other.set_loads(*model.loads_for_benchmark)
            t1 = time.perf_counter()
            o2 = original(other, other.start_point(), st)
            extra.append((o2.status, o2.iterations, time.perf_counter() - t1))
        return out

    class _Model(lmod.ACModel):  # keeps the loads, so the fallback run solves the same problem
        def set_loads(self, *loads):
            self.loads_for_benchmark = loads
            return super().set_loads(*loads)

    lmod.interior_point, saved_model = timed, lmod.ACModel
    lmod.ACModel = _Model
    stats = {"draws": 0, "default": {}, "fallback_after_default_failed": {}, "changed": 0,
             "changed_draws": [], "seconds_now": 0.0, "seconds_fallback_first": 0.0,
             "iterations_now": 0, "iterations_fallback_first": 0, "extra_fallback_seconds": 0.0}
    t_start = time.perf_counter()
    try:
        for slot in range(min(samples, len(attempts))):
            for attempt in range(attempts[slot] + 1):
                runs.clear()
                extra.clear()
                _draw(job, tools, slot, attempt)
                if not runs:
                    continue  # a draw without a loadability solve
                stats["draws"] += 1
                (_, s0, i0, t0), rest = runs[0], runs[1:]
                stats["default"][s0] = stats["default"].get(s0, 0) + 1
                stats["seconds_now"] += sum(r[3] for r in runs)
                stats["iterations_now"] += sum(r[2] for r in runs)
                if s0 == "converged":  # the fallback run is the benchmark's own, added after it
                    s1, i1, t1 = extra[0]
                    stats["extra_fallback_seconds"] += t1
                    if s1 == "infeasible":  # fallback first would reject this draw
                        stats["changed"] += 1
                        stats["changed_draws"].append([slot, attempt])
                else:  # the build's own fallback run
                    (_, s1, i1, t1), = rest
                    failed = stats["fallback_after_default_failed"]
                    failed[s1] = failed.get(s1, 0) + 1
                # fallback first: the default run is skipped only where the fallback ends infeasible
                skip = s1 == "infeasible"
                stats["seconds_fallback_first"] += t1 + (0.0 if skip else t0)
                stats["iterations_fallback_first"] += i1 + (0 if skip else i0)
    finally:
        lmod.interior_point, lmod.ACModel = original, saved_model
    stats["samples"] = min(samples, len(attempts))
    stats["wall_seconds"] = time.perf_counter() - t_start
    stats["ratio_fallback_first_to_now"] = (stats["seconds_fallback_first"] / stats["seconds_now"]
                                            if stats["seconds_now"] else None)
    return stats


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("splits", nargs="*",
                    help="NETWORK/SPLIT[:N] of committed splits whose recipes record each draw (N: first samples)")
    ap.add_argument("--samples", type=int, default=100, help="first samples of each split (default 100)")
    ap.add_argument("--quick", action="store_true", help="a short run: " + " ".join(QUICK))
    ap.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "results" / "loadability_weights.json")
    args = ap.parse_args(argv)
    results = {}
    try:
        for spec in args.splits or (QUICK if args.quick else FULL):
            name, _, count = spec.partition(":")
            if name.count("/") != 1 or (count and not count.isdigit()):
                raise InputError("expected NETWORK/SPLIT or NETWORK/SPLIT:N (N: how many samples)", where=spec)
            results[spec] = measure(name, int(count) if count else args.samples)
            r = results[spec]
            print(f"{spec}: {r['draws']} draws of {r['samples']} samples; default {r['default']}; changed {r['changed']}; "
                  f"loadability seconds now {r['seconds_now']:.1f}, fallback first {r['seconds_fallback_first']:.1f} "
                  f"(ratio {r['ratio_fallback_first_to_now']:.2f})", flush=True)
    except InputError as exc:
        print(f"Error: {exc}", file=sys.stderr)
        return 2
    doc = {"benchmark": "loadability-weights", "flowgauge_version": __version__, "python": platform.python_version(),
           "cpu_count": os.cpu_count(), "quick": args.quick, "load_average_1min_end": os.getloadavg()[0], "results": results,
           "note": "seconds of the loadability runs a build makes now against those it would make with the "
                   "fallback weight first, from the same runs; 'changed': draws whose outcome the reordering "
                   "would change (the default weight converges, the fallback weight ends infeasible)"}
    atomic_write_bytes(args.out, canonical_json(doc, indent=1))
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
