"""Batched power-system physics: admittances, injections, branch flows, residuals,
Jacobians and the DC approximation. Arrays in, arrays out; per unit and radians."""

from ._admittance import Admittance, admittance
from ._dc import dc_matrices, ptdf
from ._flows import balance_residuals, branch_flows, bus_injections, bus_voltages
from ._jacobian import JacobianPattern, powerflow_jacobian

__all__ = [
    "Admittance", "admittance", "bus_voltages", "bus_injections", "branch_flows",
    "balance_residuals", "JacobianPattern", "powerflow_jacobian", "dc_matrices", "ptdf",
]
