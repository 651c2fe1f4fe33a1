"""Power at each branch end and its first and second derivatives, vectorised over ends.

A branch end ``a`` (own bus) connected to bus ``b`` carries, in polar coordinates with
``d = va_a - va_b``::

    P = g_aa V_a^2 + V_a V_b (g cos d + b sin d)
    Q = -b_aa V_a^2 + V_a V_b (g sin d - b cos d)

where ``g_aa + j b_aa`` is the end's self admittance (``yff`` or ``ytt``) and ``g + j b`` the
mutual one (``yft`` or ``ytf``); this is ``S = V_a conj(I_a)`` of the standard pi model
(common practice). A bus injection is the sum of its branch-end powers plus its shunt, so
the balance equations, the branch-flow limits and all their derivatives are built from the
quantities below. Derivative order of the four variables: ``(va_a, va_b, vm_a, vm_b)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["EndTerms", "end_terms"]


@dataclass(frozen=True)
class EndTerms:
    """Values at n branch ends: ``p``, ``q`` shape (n,) [p.u.]; ``dp``, ``dq`` shape (n, 4);
    ``hp``, ``hq`` shape (n, 4, 4) (second derivatives)."""

    p: np.ndarray
    q: np.ndarray
    dp: np.ndarray
    dq: np.ndarray
    hp: np.ndarray | None
    hq: np.ndarray | None


def _hessian(dd: np.ndarray, dva: np.ndarray, dvb: np.ndarray, vava: np.ndarray,
             vavb: np.ndarray) -> np.ndarray:
    n = dd.shape[0]
    h = np.empty((n, 4, 4))
    h[:, 0, 0] = dd
    h[:, 0, 1] = -dd
    h[:, 1, 0] = -dd
    h[:, 1, 1] = dd
    h[:, 0, 2] = h[:, 2, 0] = dva
    h[:, 1, 2] = h[:, 2, 1] = -dva
    h[:, 0, 3] = h[:, 3, 0] = dvb
    h[:, 1, 3] = h[:, 3, 1] = -dvb
    h[:, 2, 2] = vava
    h[:, 2, 3] = h[:, 3, 2] = vavb
    h[:, 3, 3] = 0.0
    return h


def end_terms(va_a: np.ndarray, va_b: np.ndarray, vm_a: np.ndarray, vm_b: np.ndarray,
              y_self: np.ndarray, y_mut: np.ndarray, second: bool = True) -> EndTerms:
    """Power at branch ends and derivatives; angles [rad], magnitudes [p.u.], admittances
    complex [p.u.], all shape (n,)."""
    d = va_a - va_b
    cos, sin = np.cos(d), np.sin(d)
    g, b = y_mut.real, y_mut.imag
    gaa, baa = y_self.real, y_self.imag
    a_ = g * cos + b * sin
    b_ = g * sin - b * cos
    vv = vm_a * vm_b
    p = gaa * vm_a**2 + vv * a_
    q = -baa * vm_a**2 + vv * b_
    dp = np.stack([-vv * b_, vv * b_, 2 * gaa * vm_a + vm_b * a_, vm_a * a_], axis=1)
    dq = np.stack([vv * a_, -vv * a_, -2 * baa * vm_a + vm_b * b_, vm_a * b_], axis=1)
    if not second:
        return EndTerms(p, q, dp, dq, None, None)
    hp = _hessian(-vv * a_, -vm_b * b_, -vm_a * b_, 2 * gaa, a_)
    hq = _hessian(-vv * b_, vm_b * a_, vm_a * a_, -2 * baa, b_)
    return EndTerms(p, q, dp, dq, hp, hq)
