"""Bus injections, branch flows and power-balance residuals for stacks of samples.

Every function accepts voltages of shape (n_bus,) or (n_samples, n_bus) and returns arrays
with the same leading shape. Per unit and radians inside; the residuals are given in MW/MVAr.
"""

from __future__ import annotations

import numpy as np

from ..network._model import Network
from ._admittance import Admittance

__all__ = ["bus_voltages", "bus_injections", "branch_flows", "balance_residuals"]


def bus_voltages(vm_pu: np.ndarray, va_rad: np.ndarray) -> np.ndarray:
    """Complex bus voltages ``vm * exp(j va)``, shape like the inputs [p.u.]."""
    return np.asarray(vm_pu, float) * np.exp(1j * np.asarray(va_rad, float))


def _apply(mat, v: np.ndarray) -> np.ndarray:
    """``mat @ v`` for each sample: ``v`` shape (n_bus,) or (n_samples, n_bus)."""
    if v.ndim == 1:
        return mat @ v
    return (mat @ v.T).T


def bus_injections(adm: Admittance, vm_pu: np.ndarray, va_rad: np.ndarray) -> np.ndarray:
    """Complex power injected into the network at each bus, ``S = V conj(Ybus V)``.

    ``vm_pu``, ``va_rad``: shape (n_bus,) or (n_samples, n_bus) [p.u.], [rad].
    Returns complex, same shape [p.u.]. Bus shunts are part of ``Ybus``, so the injection is
    what generators minus loads must supply.
    """
    v = bus_voltages(vm_pu, va_rad)
    return v * np.conj(_apply(adm.ybus, v))


def branch_flows(adm: Admittance, vm_pu: np.ndarray, va_rad: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Complex power entering each branch at its from end and at its to end.

    ``vm_pu``, ``va_rad``: shape (n_bus,) or (n_samples, n_bus) [p.u.], [rad].
    Returns ``(sf, st)``, complex, shape (n_branch,) or (n_samples, n_branch) [p.u.];
    zero for out-of-service branches.
    """
    v = bus_voltages(vm_pu, va_rad)
    sf = _apply(adm.cf, v) * np.conj(_apply(adm.yf, v))
    st = _apply(adm.ct, v) * np.conj(_apply(adm.yt, v))
    return sf, st


def balance_residuals(net: Network, adm: Admittance, vm_pu: np.ndarray, va_rad: np.ndarray,
                      pg_mw: np.ndarray, qg_mvar: np.ndarray, pd_mw: np.ndarray,
                      qd_mvar: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Power-balance residual at every bus: injection into the network minus (generation - load).

    ``vm_pu``, ``va_rad``: shape (n_bus,) or (n_samples, n_bus) [p.u.], [rad];
    ``pg_mw``, ``qg_mvar``: (…, n_gen) [MW], [MVAr]; ``pd_mw``, ``qd_mvar``: (…, n_load).
    Returns ``(dp_mw, dq_mvar)``, shape (…, n_bus) [MW], [MVAr]; zero where the bus balances.
    """
    s = bus_injections(adm, vm_pu, va_rad) * net.base_mva
    pg, qg = np.asarray(pg_mw, float), np.asarray(qg_mvar, float)
    pd, qd = np.asarray(pd_mw, float), np.asarray(qd_mvar, float)
    p_net = _apply(adm.cg, pg) - _apply(adm.cl, pd)
    q_net = _apply(adm.cg, qg) - _apply(adm.cl, qd)
    return s.real - p_net, s.imag - q_net
