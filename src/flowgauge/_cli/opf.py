"""``flowgauge opf NETWORK [--dc] [--json]``: the optimal power flow of a network's base case."""

from __future__ import annotations

import click
import numpy as np

from ..errors import InputError
from ..network import load_network
from ..opf import solve_acopf, solve_dcopf
from ._common import console, echo_json, table

__all__ = ["opf"]


@click.command("opf")
@click.argument("network")
@click.option("--dc", is_flag=True, help="Solve the DC (linearised, lossless) optimal power flow.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of tables.")
def opf(network: str, dc: bool, as_json: bool) -> None:
    """Solve the AC (or DC) optimal power flow of NETWORK's base case (a bundled name or a
    network file) and print the objective, dispatch, binding limits and prices."""
    net = load_network(network)
    res = solve_dcopf(net) if dc else solve_acopf(net)
    if not res.converged:
        raise InputError(f"the {'DC' if dc else 'AC'} optimal power flow did not converge: {res.status} "
                         f"after {res.iterations} iterations ({res.message})", where=network)
    if as_json:
        echo_json(_as_dict(net, res, dc))
    else:
        _print_summary(net, res, dc)


def _as_dict(net, res, dc: bool) -> dict:
    qg = [None] * net.n_gen if dc else res.qg_mvar.tolist()
    vm = [None] * net.n_bus if dc else res.vm_pu.tolist()
    gens = [{"id": i, "bus": b, "pg_mw": p, "qg_mvar": q}
            for i, b, p, q in zip(net.gen_id.tolist(), net.gen_bus.tolist(), res.pg_mw.tolist(), qg)]
    buses = [{"id": i, "vm_pu": v, "va_deg": a, "lmp": lmp}
             for i, v, a, lmp in zip(net.bus_id.tolist(), vm, res.va_deg.tolist(), res.lmp_per_mwh.tolist())]
    out = {"network": net.name, "formulation": "dc" if dc else "ac", "status": res.status,
           "message": res.message, "objective": res.objective, "objective_unit": "$/h",
           "iterations": res.iterations, "seconds": res.seconds, "lmp_unit": "$/MWh",
           "max_p_mismatch_mw": res.max_p_mismatch_mw, "max_limit_violation": res.max_limit_violation,
           "binding": list(res.binding), "signature": res.signature, "generators": gens, "buses": buses}
    if not dc:
        out["max_q_mismatch_mvar"] = res.max_q_mismatch_mvar
    return out


def _print_summary(net, res, dc: bool) -> None:
    kind = "DC" if dc else "AC"
    console.print(f"{kind} optimal power flow of {net.name}: {res.status} in {res.iterations} iterations "
                  f"({res.seconds * 1000:.0f} ms)")
    console.print(f"objective: {res.objective:,.2f} $/h")
    tab = table(title="Generators")
    cols = ("gen", "bus", "pg_mw", "pmin_mw", "pmax_mw") + (() if dc else ("qg_mvar",))
    for col in cols:
        tab.add_column(col, justify="right")
    for k in range(net.n_gen):
        row = [str(int(net.gen_id[k])), str(int(net.gen_bus[k])), f"{res.pg_mw[k]:.2f}",
               f"{net.pmin_mw[k]:.1f}", f"{net.pmax_mw[k]:.1f}"]
        if not dc:
            row.append(f"{res.qg_mvar[k]:.2f}")
        tab.add_row(*row)
    console.print(tab)
    lo, hi = int(np.argmin(res.lmp_per_mwh)), int(np.argmax(res.lmp_per_mwh))
    console.print(f"locational marginal prices: {res.lmp_per_mwh[lo]:.2f} $/MWh (bus {int(net.bus_id[lo])}) "
                  f"to {res.lmp_per_mwh[hi]:.2f} $/MWh (bus {int(net.bus_id[hi])})")
    console.print(f"binding limits ({len(res.binding)}, signature {res.signature}): "
                  + (", ".join(res.binding) if res.binding else "none"))
