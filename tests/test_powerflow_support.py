"""Reference solutions from PYPOWER shared by the power-flow and physics tests (no tests here)."""

from __future__ import annotations

import numpy as np
from pypower.api import ext2int, ppoption, rundcpf, runpf

from flowgauge.network import to_ppc

__all__ = ["pypower_ac", "pypower_dc", "pypower_internal"]

_OPT = dict(VERBOSE=0, OUT_ALL=0, PF_TOL=1e-10, PF_MAX_IT=30)


def pypower_ac(net) -> dict:
    """PYPOWER's Newton power flow (``runpf``) of the network's base case."""
    res, ok = runpf(to_ppc(net), ppoption(**_OPT))
    assert ok == 1
    return res


def pypower_dc(net) -> dict:
    """PYPOWER's DC power flow (``rundcpf``) of the network's base case."""
    res, ok = rundcpf(to_ppc(net), ppoption(**_OPT))
    assert ok == 1
    return res


def pypower_internal(net) -> dict:
    """The case dict with consecutive internal bus numbers, as PYPOWER's make* functions need.

    Bus order is kept (every bus is in service), so rows match our bus order."""
    ppc = ext2int(to_ppc(net))
    assert np.array_equal(ppc["order"]["bus"]["i2e"], net.bus_id)
    return ppc
