"""Build the bundled limit variants of the IEEE networks: ``<name>-limits.json`` beside each
original, with thermal ratings and angle-difference limits derived from the original's AC optimal
power flow over a seeded reference set of loadings. Every other field is the original's.

Usage:
    python tools/make_limit_variants.py [--networks ieee14,ieee57] [--out DIR]
        derive and write the variants (default: every network in METHOD["networks"]);
    python tools/make_limit_variants.py --verify
        derive again and compare with the bundled files byte for byte (exit 1 on a difference);
    python tools/make_limit_variants.py --check [--samples 200]
        solve each bundled variant on a fresh seeded set of loadings and print the share of
        samples with a thermal limit binding, an angle limit binding, and infeasible.

The method (docs/networks.md, "Limit variants"), with the parameters in ``METHOD``:

1. Capacity: the largest uniform scaling of the original's base loads that its AC-OPF can carry
   (``flowgauge.opf.max_loadability``), ``capacity = 1 + lam_limit``.
2. Reference set: ``reference_samples`` loadings from ``numpy.random.Generator(PCG64(seed))``.
   Each has a system level ``L ~ U(level_low, level_high)`` (a fraction of the capacity) and
   each load an independent factor ``u ~ U(1 - load_spread, 1 + load_spread)``; the load is
   ``base x capacity x L x u`` for both its MW and MVAr (the power factor is kept).
3. Two AC-OPFs of the original per loading (cold start): the least-cost dispatch (the
   network's own costs) and the minimum-loss dispatch (every generator at the same linear
   cost). Loadings where either does not converge are left out. For each branch: the apparent
   power flow (larger of its two ends) [MVA] and the angle difference ``va_from - va_to`` [deg].
4. Rating = the larger of ``rate_factor x`` the ``rate_percentile``-th percentile of the
   least-cost flow and the largest minimum-loss flow; at least ``rate_floor_share x`` the
   median rating; rounded up to ``rate_step_mva``.
5. Angle-difference limit (symmetric) = the larger of ``angle_factor x`` the
   ``angle_percentile``-th percentile of the least-cost |angle difference| and the largest
   minimum-loss |angle difference|; at least ``angle_floor_deg``; rounded up to
   ``angle_step_deg``; at most ``angle_cap_deg`` (+-30 degrees, common practice, which alone
   never binds on these networks: the largest least-cost angle difference over the reference
   set is in each variant's provenance).

Because no limit is below the minimum-loss dispatch's flow or angle at any reference loading,
that dispatch stays feasible in the variant at every loading used: the limits bind on the
least-cost dispatch (cheap generation pushing power along a few corridors) without making the
loadings of the reference set infeasible.

Deterministic: the same parameters give the same bytes (canonical JSON). The originals are read,
never written.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import flowgauge  # noqa: F401  (first: it pins OpenBLAS's and numpy's CPU level before numpy loads)
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))

from flowgauge._io import canonical_json  # noqa: E402
from flowgauge.network import load_network, network_to_dict  # noqa: E402
from flowgauge.network._model import Network  # noqa: E402
from flowgauge.opf import ACOPF, OPFSettings, max_loadability  # noqa: E402
from flowgauge.physics import admittance, branch_flows  # noqa: E402
from flowgauge.splits import network_hash  # noqa: E402

DATA = ROOT / "src" / "flowgauge" / "network" / "data"
SUFFIX = "-limits"

METHOD = {
    "name": "flow-percentile-ratings",
    "version": 1,
    "networks": ["ieee14", "ieee30", "ieee57", "ieee118", "ieee300"],
    "seed": 20240611,
    "reference_samples": 300,
    "level_low": 0.3,
    "level_high": 1.0,
    "load_spread": 0.5,
    "rate_percentile": 85.0,
    "rate_factor": 1.0,
    "rate_floor_share": 0.25,
    "rate_step_mva": 1.0,
    "angle_percentile": 85.0,
    "angle_factor": 1.0,
    "angle_floor_deg": 2.0,
    "angle_cap_deg": 30.0,
    "angle_step_deg": 0.5,
    "check_seed": 20240612,
    "check_samples": 200,
}


def capacity(net: Network) -> float:
    """1 + the largest uniform scaling of the base loads the AC-OPF can carry [-]."""
    res = max_loadability(net, settings=OPFSettings())
    if not res.converged:
        raise SystemExit(f"{net.name}: maximum loadability did not converge ({res.status})")
    return 1.0 + float(res.lam_limit)


def draw_loadings(net: Network, cap: float, n: int, seed: int, m: dict) -> tuple[np.ndarray, np.ndarray]:
    """``n`` loadings, shape (n, n_load) [MW], [MVAr]: level x independent per-load factors."""
    rng = np.random.Generator(np.random.PCG64(seed))
    level = rng.uniform(m["level_low"], m["level_high"], size=(n, 1))
    u = rng.uniform(1.0 - m["load_spread"], 1.0 + m["load_spread"], size=(n, net.n_load))
    scale = cap * level * u
    return net.pd_mw[None, :] * scale, net.qd_mvar[None, :] * scale


def equal_cost(net: Network) -> Network:
    """The network with every generator at the same linear cost (1 $/MWh, no c2, no c0): its
    AC-OPF minimises total generation, i.e. the losses (the minimum-loss dispatch)."""
    ones, zeros = np.ones(net.n_gen), np.zeros(net.n_gen)
    return net.replace(cost_c2=zeros, cost_c1=ones, cost_c0=zeros)


def solve_set(net: Network, pd: np.ndarray, qd: np.ndarray):
    """AC-OPF of every loading (cold start): converged mask (n_samples,), and the branch flow
    (larger of the two ends) [MVA] and angle difference ``va_from - va_to`` [deg], shape
    (n_samples, n_branch), NaN where the solve did not converge."""
    solver = ACOPF(net, OPFSettings())
    results = [solver.solve(pd[i], qd[i]) for i in range(len(pd))]
    ok = np.array([r.converged for r in results])
    vm = np.array([r.vm_pu for r in results])
    va = np.array([r.va_deg for r in results])
    sf, st = branch_flows(admittance(net), vm, np.deg2rad(va))
    flow = np.maximum(np.abs(sf), np.abs(st)) * net.base_mva
    dang = va[:, net.f_idx] - va[:, net.t_idx]
    flow[~ok] = np.nan
    dang[~ok] = np.nan
    return ok, flow, dang


def _round_up(x: np.ndarray, step: float) -> np.ndarray:
    # A tiny downward nudge keeps values that sit on a step (up to float noise) on that step.
    return np.ceil(np.asarray(x) / step - 1e-9) * step


def derive_limits(flow_cost, dang_cost, flow_loss, dang_loss, m: dict):
    """Ratings [MVA] and symmetric angle limits [deg], shape (n_branch,), from the flows and
    angle differences of the least-cost and the minimum-loss dispatch over the reference set
    (each shape (n_samples, n_branch), NaN rows for loadings that did not converge).

    Returns ``(rate_mva, angle_deg, rate_floor_mva)``."""
    keep = np.all(np.isfinite(flow_cost), axis=1) & np.all(np.isfinite(flow_loss), axis=1)
    fc, ac, fl, al = flow_cost[keep], np.abs(dang_cost[keep]), flow_loss[keep], np.abs(dang_loss[keep])
    rate = np.maximum(m["rate_factor"] * np.percentile(fc, m["rate_percentile"], axis=0), fl.max(axis=0))
    floor = m["rate_floor_share"] * float(np.median(rate))
    rate = np.maximum(_round_up(np.maximum(rate, floor), m["rate_step_mva"]), m["rate_step_mva"])
    ang = np.maximum(m["angle_factor"] * np.percentile(ac, m["angle_percentile"], axis=0), al.max(axis=0))
    ang = np.maximum(ang, m["angle_floor_deg"])
    ang = np.minimum(_round_up(ang, m["angle_step_deg"]), m["angle_cap_deg"])
    return rate, ang, floor


def build_variant(name: str, m: dict = METHOD, log=print) -> Network:
    """The limit variant of bundled network ``name``."""
    net = load_network(name)
    cap = capacity(net)
    pd, qd = draw_loadings(net, cap, m["reference_samples"], m["seed"], m)
    ok_c, flow_c, dang_c = solve_set(net, pd, qd)
    ok_l, flow_l, dang_l = solve_set(equal_cost(net), pd, qd)
    rate, ang, floor = derive_limits(flow_c, dang_c, flow_l, dang_l, m)
    off = ~net.in_service
    rate = np.where(off, net.rate_mva, rate)
    amin = np.where(off, net.angmin_deg, -ang)
    amax = np.where(off, net.angmax_deg, ang)
    params = {k: v for k, v in m.items() if k not in ("networks", "check_seed", "check_samples")}
    used = int(np.sum(ok_c & ok_l))
    largest = float(np.nanmax(np.abs(dang_c)))
    provenance = {
        "title": f"{net.provenance.get('title', name)}, with derived thermal and angle limits",
        "derived_from": name,
        "derived_from_content_hash": network_hash(net),
        "derived_by": "tools/make_limit_variants.py",
        "method": params,
        "capacity_factor": round(cap, 6),
        "reference_loadings_used": used,
        "largest_angle_difference_deg": round(largest, 3),
        "rate_floor_mva": round(floor, 6),
        "notes": "every field other than rate_mva, angmin_deg, angmax_deg and provenance is the "
                 f"original's ({net.provenance.get('source', '')}); method in "
                 "docs/networks.md (Limit variants)",
    }
    log(f"{name}: capacity x{cap:.3f}; reference loadings used {used}/{len(pd)} "
        f"(least cost {int(ok_c.sum())}, minimum loss {int(ok_l.sum())}); largest angle "
        f"difference {largest:.1f} deg; rating floor {floor:.1f} MVA")
    return net.replace(name=name + SUFFIX, rate_mva=rate, angmin_deg=amin, angmax_deg=amax,
                       provenance=provenance)


def variant_bytes(variant: Network) -> bytes:
    """The file content ``write_network_json`` writes (canonical JSON)."""
    return canonical_json(network_to_dict(variant), indent=1)


def check_variant(name: str, m: dict = METHOD, n: int | None = None, var: Network | None = None) -> dict:
    """Binding and infeasible shares of variant ``var`` (default: the bundled ``name + SUFFIX``)
    on a fresh seeded set drawn as the reference set (capacity of the original)."""
    orig = load_network(name)
    var = var if var is not None else load_network(name + SUFFIX)
    cap = float(var.provenance["capacity_factor"])
    n = n or m["check_samples"]
    pd, qd = draw_loadings(orig, cap, n, m["check_seed"], m)
    solver = ACOPF(var, OPFSettings())
    solver_orig = ACOPF(orig, OPFSettings())
    thermal = angle = either = conv = conv_orig = 0
    for i in range(n):
        conv_orig += solver_orig.solve(pd[i], qd[i]).converged
        r = solver.solve(pd[i], qd[i])
        if not r.converged:
            continue
        conv += 1
        t = any(b.endswith((":rate_from", ":rate_to")) for b in r.binding)
        a = any(b.endswith((":angmin", ":angmax")) for b in r.binding)
        thermal += t
        angle += a
        either += t or a
    base = solver.solve()
    return {"name": name + SUFFIX, "samples": n, "converged": conv, "thermal": thermal / n,
            "angle": angle / n, "either": either / n, "not_converged": (n - conv) / n,
            "not_converged_original": (n - conv_orig) / n,
            "base_status": base.status, "base_binding": [b for b in base.binding if b.startswith("branch:")]}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--networks", default=",".join(METHOD["networks"]))
    ap.add_argument("--out", type=Path, default=DATA)
    ap.add_argument("--verify", action="store_true")
    ap.add_argument("--check", action="store_true")
    ap.add_argument("--samples", type=int, default=None)
    args = ap.parse_args(argv)
    names = [s for s in args.networks.split(",") if s]
    for name in names:
        if name not in METHOD["networks"]:
            print(f"Error: --networks: unknown network {name!r}; choose from {METHOD['networks']}",
                  file=sys.stderr)
            return 2
    if args.check:
        print("| network | loadings | thermal limit binds | angle limit binds | either binds | "
              "not converged (variant) | not converged (original) |")
        print("|---|---|---|---|---|---|---|")
        for name in names:
            c = check_variant(name, n=args.samples)
            print(f"| {c['name']} | {c['samples']} | {c['thermal']:.0%} | {c['angle']:.0%} | "
                  f"{c['either']:.0%} | {c['not_converged']:.1%} | {c['not_converged_original']:.1%} |",
                  flush=True)
        return 0
    bad = 0
    for name in names:
        variant = build_variant(name)
        data = variant_bytes(variant)
        path = args.out / f"{name}{SUFFIX}.json"
        if args.verify:
            same = path.exists() and path.read_bytes() == data
            print(f"{path.name}: {'identical' if same else 'DIFFERS'}")
            bad += not same
        else:
            from flowgauge._io import atomic_write_bytes
            atomic_write_bytes(path, data)
            print(f"wrote {path}")
    return 1 if bad else 0


if __name__ == "__main__":
    raise SystemExit(main())
