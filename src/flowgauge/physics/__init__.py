"""Batched power-system physics: admittances, injections, branch flows, residuals,
Jacobians and the DC approximation. Arrays in, arrays out; per unit and radians."""

from ._admittance import Admittance, admittance

__all__ = ["Admittance", "admittance"]
