"""Result objects of the power-flow solvers (fixed fields; statuses from ``_status.STATUSES``)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["PowerFlowResult", "BatchPowerFlowResult", "DCPowerFlowResult"]


@dataclass(frozen=True, eq=False)
class PowerFlowResult:
    """One AC power flow.

    ``converged``: the largest absolute mismatch fell below the tolerance; ``status``: a key of
    ``STATUSES``; ``message``: its text; ``iterations``: Newton steps taken (summed over the
    rounds of reactive-limit enforcement); ``max_mismatch_pu``: largest absolute active or
    reactive mismatch of the last iterate [p.u.].
    ``vm_pu`` [p.u.], ``va_deg`` [deg]: shape (n_bus,).
    ``pg_mw`` [MW], ``qg_mvar`` [MVAr]: shape (n_gen,); the setpoints, except that the first
    generator of each reference bus takes the bus's active-power balance, and every
    generator at a PV or reference bus gets its bus's reactive output shared among the bus's
    generators in proportion to their reactive ranges (equally where the ranges are empty
    or infinite). Generators at PQ buses keep their reactive setpoint.
    ``pf_mw``, ``qf_mvar``, ``pt_mw``, ``qt_mvar`` [MW], [MVAr]: power entering each branch
    at its from and to end, shape (n_branch,); ``sf_mva``, ``st_mva``: their magnitudes [MVA].
    ``seconds``: wall time of the solve [s].
    """

    converged: bool
    status: str
    message: str
    iterations: int
    max_mismatch_pu: float
    vm_pu: np.ndarray
    va_deg: np.ndarray
    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    pf_mw: np.ndarray
    qf_mvar: np.ndarray
    pt_mw: np.ndarray
    qt_mvar: np.ndarray
    sf_mva: np.ndarray
    st_mva: np.ndarray
    seconds: float


@dataclass(frozen=True, eq=False)
class BatchPowerFlowResult:
    """AC power flows of many samples of one network: the fields of :class:`PowerFlowResult`
    stacked on a leading sample axis.

    ``converged`` (n_samples,) bool; ``status``, ``message`` (n_samples,) str;
    ``iterations`` (n_samples,) int; ``max_mismatch_pu`` (n_samples,) [p.u.];
    ``vm_pu``, ``va_deg`` (n_samples, n_bus); ``pg_mw``, ``qg_mvar`` (n_samples, n_gen);
    ``pf_mw`` … ``st_mva`` (n_samples, n_branch); ``seconds``: wall time of the whole batch [s].
    ``at_q_limit`` (n_samples, n_gen) int8 with reactive-limit enforcement, else None: +1 / -1
    for a generator held at its maximum / minimum reactive output (its bus switched to PQ).
    """

    converged: np.ndarray
    status: np.ndarray
    message: np.ndarray
    iterations: np.ndarray
    max_mismatch_pu: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray
    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    pf_mw: np.ndarray
    qf_mvar: np.ndarray
    pt_mw: np.ndarray
    qt_mvar: np.ndarray
    sf_mva: np.ndarray
    st_mva: np.ndarray
    seconds: float
    at_q_limit: np.ndarray | None = None

    @property
    def n_samples(self) -> int:
        return int(self.converged.shape[0])


@dataclass(frozen=True, eq=False)
class DCPowerFlowResult:
    """DC power flow(s): lossless, flat voltage magnitudes.

    ``va_deg`` (…, n_bus) [deg]; ``pf_mw`` (…, n_branch): from-end active flow (the to end
    carries its negative) [MW]; ``pg_mw`` (…, n_gen): the setpoints with the first generator of
    each reference bus taking the balance [MW]; ``p_ref_mw`` (…, n_ref): total generation at
    each reference bus (in ``net.ref_idx`` order) [MW]. ``…`` is (n_samples,) for stacked
    inputs and empty otherwise.
    """

    va_deg: np.ndarray
    pf_mw: np.ndarray
    pg_mw: np.ndarray
    p_ref_mw: np.ndarray
