"""``flowgauge powerflow NETWORK [--json]``: the AC power flow of a network's base case."""

from __future__ import annotations

import click
import numpy as np

from ..errors import InputError
from ..network import load_network
from ..network._model import BUS_TYPE_NAMES
from ..powerflow import solve_powerflow
from ._common import console, echo_json, table

__all__ = ["powerflow"]


@click.command("powerflow")
@click.argument("network")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of tables.")
def powerflow(network: str, as_json: bool) -> None:
    """Solve the AC power flow of NETWORK's base case (a bundled name or a network file)."""
    net = load_network(network)
    res = solve_powerflow(net)
    if not res.converged:
        raise InputError(f"the power flow did not converge: {res.status} after {res.iterations} "
                         f"iterations (largest mismatch {res.max_mismatch_pu:.3g} p.u.)", where=network)
    if as_json:
        echo_json(_as_dict(net, res))
    else:
        _print_tables(net, res)


def _as_dict(net, res) -> dict:
    buses = [{"id": i, "vm_pu": v, "va_deg": a}
             for i, v, a in zip(net.bus_id.tolist(), res.vm_pu.tolist(), res.va_deg.tolist())]
    branches = [{"id": i, "pf_mw": a, "qf_mvar": b, "pt_mw": c, "qt_mvar": d}
                for i, a, b, c, d in zip(net.branch_id.tolist(), res.pf_mw.tolist(), res.qf_mvar.tolist(),
                                         res.pt_mw.tolist(), res.qt_mvar.tolist())]
    gens = [{"id": i, "pg_mw": p, "qg_mvar": q}
            for i, p, q in zip(net.gen_id.tolist(), res.pg_mw.tolist(), res.qg_mvar.tolist())]
    return {"network": net.name, "converged": res.converged, "iterations": res.iterations,
            "max_mismatch_pu": res.max_mismatch_pu, "buses": buses, "branches": branches,
            "generators": gens}


def _print_tables(net, res) -> None:
    console.print(f"Power flow of {net.name}: {res.status} in {res.iterations} iterations "
                  f"(largest mismatch {res.max_mismatch_pu:.2e} p.u.)")
    tab = table(title="Buses")
    for col in ("bus", "type", "vm_pu", "va_deg"):
        tab.add_column(col, justify="right")
    for i, t, v, a in zip(net.bus_id.tolist(), net.bus_type.tolist(), res.vm_pu.tolist(), res.va_deg.tolist()):
        tab.add_row(str(i), BUS_TYPE_NAMES.get(t, str(t)), f"{v:.4f}", f"{a:.3f}")
    console.print(tab)
    gen_mw, load_mw = float(np.sum(res.pg_mw)), float(np.sum(net.pd_mw))
    gen_mvar, load_mvar = float(np.sum(res.qg_mvar)), float(np.sum(net.qd_mvar))
    totals = table(title="Totals")
    for col in ("", "MW", "MVAr"):
        totals.add_column(col, justify="right")
    totals.add_row("generation", f"{gen_mw:.2f}", f"{gen_mvar:.2f}")
    totals.add_row("load", f"{load_mw:.2f}", f"{load_mvar:.2f}")
    loss = res.pf_mw + res.pt_mw
    totals.add_row("branch losses", f"{float(np.sum(loss)):.2f}",
                   f"{float(np.sum(res.qf_mvar + res.qt_mvar)):.2f}")
    console.print(totals)
