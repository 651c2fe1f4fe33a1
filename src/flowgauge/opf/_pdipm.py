"""A primal-dual interior-point method for sparse nonlinear programs.

Solves::

    min f(x)  subject to  g(x) = 0,  h(x) <= 0,  x_lower <= x <= x_upper

by Newton steps on the perturbed Karush-Kuhn-Tucker conditions, following

* H. Wang, C. E. Murillo-Sanchez, R. D. Zimmerman, R. J. Thomas, "On computational issues of
  market-based optimal power flow", IEEE Trans. Power Systems 22(3):1185-1193, 2007,
  doi:10.1109/TPWRS.2007.901301 (the primal-dual method, step-length rules and stopping tests);
* J. Nocedal, S. J. Wright, Numerical Optimization, 2nd ed., Springer 2006, ch. 19
  (interior-point methods for nonlinear programming).

Inequalities (including the finite variable bounds) get slacks ``z > 0`` with ``h + z = 0``
and multipliers ``mu > 0``; the barrier parameter ``gamma`` goes to zero, set each iteration by
Mehrotra's predictor-corrector rule (S. Mehrotra, SIAM J. Optim. 2(4):575-601, 1992) or as
``centering`` times the mean complementarity ``z'mu / n_ineq``, and never below a floor tied to
the complementarity test. Eliminating ``dz`` and ``dmu`` reduces each Newton step to the
symmetric indefinite system::

    [ M   dg' ] [dx ]   [ -N ]      M = Lxx + dh' diag(mu/z) dh
    [ dg  0   ] [dlam] = [ -g ]     N = Lx + dh' (mu*h + gamma) / z

of size n_x + n_eq, factorised by scipy's sparse LU. Step lengths keep ``z`` and ``mu``
positive (a fraction ``step_to_boundary`` of the step to the boundary at most).

The problem object supplies values and the linear algebra pieces, so each formulation can
assemble its matrices its own way (see :class:`Problem`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ._settings import OPFSettings

__all__ = ["Problem", "IPOutcome", "interior_point"]


class Problem(Protocol):
    """What :func:`interior_point` needs from a formulation.

    ``n_x``, ``n_eq``, ``n_ineq``: sizes. ``x_lower``, ``x_upper``: bounds, shape (n_x,), with
    -inf / +inf for none. ``evaluate(x)`` stores the point and returns ``(f, g, h)``; the other
    methods refer to the last evaluated point: ``grad_lagrangian(lam, mu)`` is
    ``df + dg' lam + dh' mu`` (bounds excluded), ``jac_h(v)`` is ``dh v``, ``jac_h_t(w)`` is
    ``dh' w``, and ``kkt_matrix(lam, mu, d_h, d_x, reg)`` the CSC matrix
    ``[[Lxx + dh' diag(d_h) dh + diag(d_x), dg'], [dg, -reg I]]``.
    """

    n_x: int
    n_eq: int
    n_ineq: int
    x_lower: np.ndarray
    x_upper: np.ndarray

    def evaluate(self, x: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]: ...
    def grad_lagrangian(self, lam: np.ndarray, mu: np.ndarray) -> np.ndarray: ...
    def jac_h(self, v: np.ndarray) -> np.ndarray: ...
    def jac_h_t(self, w: np.ndarray) -> np.ndarray: ...
    def kkt_matrix(self, lam: np.ndarray, mu: np.ndarray, d_h: np.ndarray, d_x: np.ndarray,
                   reg: float) -> sp.csc_matrix: ...


@dataclass(frozen=True)
class IPOutcome:
    """Raw outcome of :func:`interior_point`.

    ``x`` (n_x,); ``lam`` (n_eq,); ``mu`` (n_ineq,) for ``h``; ``mu_lower``, ``mu_upper`` (n_x,)
    for the bounds (0 where a bound is infinite); ``status`` a key of the status table;
    ``feasibility`` (unscaled max residual / violation), ``gradient`` (scaled dual
    infeasibility), ``complementarity`` (scaled), ``cost_change`` (relative).
    """

    x: np.ndarray
    lam: np.ndarray
    mu: np.ndarray
    mu_lower: np.ndarray
    mu_upper: np.ndarray
    f: float
    status: str
    iterations: int
    feasibility: float
    gradient: float
    complementarity: float
    cost_change: float


def _max_step(v: np.ndarray, dv: np.ndarray, xi: float) -> float:
    neg = dv < 0
    if not np.any(neg):
        return 1.0
    return float(min(xi * np.min(-v[neg] / dv[neg]), 1.0))


class _Bounds:
    """Finite variable bounds as extra inequality rows ``x_lower - x <= 0``, ``x - x_upper <= 0``."""

    def __init__(self, lower: np.ndarray, upper: np.ndarray):
        self.il = np.flatnonzero(np.isfinite(lower))
        self.iu = np.flatnonzero(np.isfinite(upper))
        self.lower = lower[self.il]
        self.upper = upper[self.iu]
        self.nl = self.il.size
        self.n = self.il.size + self.iu.size

    def values(self, x: np.ndarray) -> np.ndarray:
        return np.concatenate([self.lower - x[self.il], x[self.iu] - self.upper])

    def jac(self, v: np.ndarray) -> np.ndarray:
        return np.concatenate([-v[self.il], v[self.iu]])

    def jac_t(self, w: np.ndarray, n_x: int) -> np.ndarray:
        out = np.zeros(n_x)
        np.add.at(out, self.il, -w[: self.nl])
        np.add.at(out, self.iu, w[self.nl:])
        return out

    def diag(self, d: np.ndarray, n_x: int) -> np.ndarray:
        out = np.zeros(n_x)
        np.add.at(out, self.il, d[: self.nl])
        np.add.at(out, self.iu, d[self.nl:])
        return out


def _factor(problem: Problem, lam, mu_h, d_h, d_x, delta: float):
    """Factorise the reduced Newton matrix with ``delta`` added to its primal diagonal; retry
    with a small dual regularisation if singular. Returns ``(solve, matrix)`` or None."""
    for reg in (0.0, 1e-10, 1e-7):
        w = problem.kkt_matrix(lam, mu_h, d_h, d_x + (delta + reg), reg)
        try:
            with np.errstate(all="ignore"):
                lu = spla.splu(w, permc_spec="COLAMD", diag_pivot_thresh=0.1)
        except RuntimeError:
            continue
        return lu.solve, w
    return None


class _Curvature:
    """Primal regularisation by the inertia-free curvature test of Chiang and Zavala
    (Comput. Optim. Appl. 64:327-354, 2016): a step direction ``dx`` is accepted when
    ``dx' M dx >= kappa dx'dx``; otherwise ``delta I`` is added to ``M`` and the system is
    factorised again, ``delta`` growing as in Wachter and Biegler (Math. Program.
    106:25-57, 2006, section 3.1)."""

    KAPPA = 1e-8
    FIRST, MIN, MAX = 1e-4, 1e-20, 1e20

    def __init__(self) -> None:
        self.last = 0.0

    def ok(self, w: sp.spmatrix, dx: np.ndarray) -> bool:
        n = dx.size
        mdx = (w @ np.concatenate([dx, np.zeros(w.shape[0] - n)]))[:n]
        return float(dx @ mdx) >= self.KAPPA * float(dx @ dx)

    def next(self, delta: float) -> float:
        if delta == 0.0:
            return self.FIRST if self.last == 0.0 else max(self.MIN, self.last / 3.0)
        return delta * (100.0 if self.last == 0.0 else 8.0)


@dataclass
class _Iterate:
    """The primal-dual point: ``x``, slacks ``z`` and multipliers ``mu`` of ``hb`` (problem
    inequalities, then bounds), multipliers ``lam`` of ``g``, and the values at ``x``."""

    x: np.ndarray
    z: np.ndarray
    mu: np.ndarray
    lam: np.ndarray
    f: float
    g: np.ndarray
    hb: np.ndarray


def _measures(it: _Iterate, lx: np.ndarray, f_prev: float) -> tuple[float, float, float, float, float]:
    """(feasibility, scaled gradient, scaled complementarity, cost change, largest multiplier)."""
    feas = max(float(np.max(np.abs(it.g), initial=0.0)), float(np.max(it.hb, initial=0.0)))
    norm_x = float(np.max(np.abs(it.x), initial=0.0))
    mult = max(float(np.max(np.abs(it.lam), initial=0.0)), float(np.max(it.mu, initial=0.0)))
    grad = float(np.max(np.abs(lx), initial=0.0)) / (1.0 + mult)
    comp = float(np.max(it.z * it.mu, initial=0.0)) / (1.0 + norm_x)
    cost = abs(it.f - f_prev) / (1.0 + abs(f_prev))
    return feas, grad, comp, cost, mult


def _direction(problem: Problem, bounds: _Bounds, it: _Iterate, lx, solve, target):
    """Newton direction (dx, dlam, dz, dmu) for the complementarity target ``target``."""
    n_h, n_x = problem.n_ineq, problem.n_x
    zinv = 1.0 / it.z
    w = zinv * (it.mu * it.hb + target)
    n_vec = lx + problem.jac_h_t(w[:n_h]) + bounds.jac_t(w[n_h:], n_x)
    sol = solve(-np.concatenate([n_vec, it.g]))
    dx = sol[:n_x]
    dz = -it.hb - it.z - np.concatenate([problem.jac_h(dx), bounds.jac(dx)])
    return dx, sol[n_x:], dz, -it.mu + zinv * (target - it.mu * dz)


def _newton_step(problem: Problem, bounds: _Bounds, it: _Iterate, lx, gamma: float, floor: float,
                 settings: OPFSettings, curvature: _Curvature):
    """The step direction of one iteration, or None when the Newton matrix cannot be factorised.

    Factorises (adding ``delta I`` until the curvature test passes), then takes Mehrotra's
    predictor-corrector direction, or the plain direction with barrier ``gamma``."""
    n_h, n_in = problem.n_ineq, it.z.size
    d = it.mu * (1.0 / it.z)
    delta = 0.0
    pc = settings.predictor_corrector and n_in > 0
    while True:
        fac = _factor(problem, it.lam, it.mu[:n_h], d[:n_h], bounds.diag(d[n_h:], problem.n_x), delta)
        if fac is None:
            return None
        solve, wmat = fac
        step = _direction(problem, bounds, it, lx, solve, 0.0 if pc else gamma)
        if curvature.ok(wmat, step[0]) or delta >= curvature.MAX:
            break
        delta = curvature.next(delta)
    if delta > 0.0:
        curvature.last = delta
    if not pc:
        return step
    # Mehrotra: the affine-scaling predictor sets the centering, the corrector adds the
    # second-order complementarity term
    _, _, dz, dmu = step
    ap, ad = _max_step(it.z, dz, 1.0), _max_step(it.mu, dmu, 1.0)
    mean = float(it.z @ it.mu) / n_in
    mean_aff = float((it.z + ap * dz) @ (it.mu + ad * dmu)) / n_in
    sigma = min(1.0, (mean_aff / mean) ** 3) if mean > 0 else 0.0
    corrected = _direction(problem, bounds, it, lx, solve, max(sigma * mean, floor) - dz * dmu)
    if _max_step(it.z, corrected[2], settings.step_to_boundary) >= settings.corrector_min_step:
        return corrected
    return _direction(problem, bounds, it, lx, solve, gamma)  # short corrected step: a plain one


def _start(problem: Problem, bounds: _Bounds, x0: np.ndarray, lam0) -> _Iterate:
    x = np.asarray(x0, float).copy()
    f, g, h = problem.evaluate(x)
    hb = np.concatenate([h, bounds.values(x)])
    z = np.ones(hb.size)
    far = hb < -1.0
    z[far] = -hb[far]
    lam = np.zeros(problem.n_eq) if lam0 is None else np.asarray(lam0, float).copy()
    return _Iterate(x=x, z=z, mu=1.0 / z, lam=lam, f=f, g=g, hb=hb)


def _outcome(it: _Iterate, bounds: _Bounds, n_h: int, status: str, iterations: int, conds) -> IPOutcome:
    n_x = it.x.size
    mu_lower, mu_upper = np.zeros(n_x), np.zeros(n_x)
    mu_lower[bounds.il] = it.mu[n_h:n_h + bounds.nl]
    mu_upper[bounds.iu] = it.mu[n_h + bounds.nl:]
    return IPOutcome(x=it.x, lam=it.lam, mu=it.mu[:n_h].copy(), mu_lower=mu_lower, mu_upper=mu_upper,
                     f=float(it.f), status=status, iterations=iterations, feasibility=conds[0],
                     gradient=conds[1], complementarity=conds[2], cost_change=conds[3])


def interior_point(problem: Problem, x0: np.ndarray, settings: OPFSettings,
                   lam0: np.ndarray | None = None) -> IPOutcome:
    """Run the primal-dual interior-point method from ``x0`` (shape (n_x,)).

    ``lam0`` optionally gives starting equality multipliers. Returns an :class:`IPOutcome`;
    never raises for a problem that fails to converge.
    """
    st = settings
    bounds = _Bounds(problem.x_lower, problem.x_upper)
    n_h = problem.n_ineq
    it = _start(problem, bounds, x0, lam0)
    n_in = it.z.size
    gamma, f_prev, grad_scale = 1.0, it.f, None
    feas_hist: list[float] = []
    curvature = _Curvature()
    conds = (np.inf, np.inf, np.inf, np.inf)
    k = 0
    while True:
        lx = problem.grad_lagrangian(it.lam, it.mu[:n_h]) + bounds.jac_t(it.mu[n_h:], problem.n_x)
        if grad_scale is None:
            grad_scale = 1.0 + float(np.max(np.abs(lx), initial=0.0))
        *conds, mult = _measures(it, lx, f_prev)
        feas = conds[0]
        if not np.all(np.isfinite([it.f, *conds[:3]])):
            status = "numerical_failure"
            break
        if all(c <= tol for c, tol in zip(conds, (st.feasibility_tol, st.gradient_tol,
                                                   st.complementarity_tol, st.cost_tol))):
            status = "converged"
            break
        feas_hist.append(feas)
        m = st.stall_iterations
        if (len(feas_hist) > m and feas > st.feasibility_tol and feas > 0.5 * feas_hist[-m - 1]
                and mult > st.multiplier_limit * grad_scale):
            status = "infeasible"
            break
        if k >= st.max_iter:
            status = "infeasible" if feas > st.feasibility_tol and mult > st.multiplier_limit * grad_scale \
                else "iteration_limit"
            break
        k += 1
        # the barrier never falls far below what the complementarity test needs, so the
        # Newton matrix keeps its conditioning while the other tests are being met
        norm_x = float(np.max(np.abs(it.x), initial=0.0))
        floor = st.barrier_floor * st.complementarity_tol * (1.0 + norm_x)
        step = _newton_step(problem, bounds, it, lx, gamma, floor, st, curvature)
        if step is None or not (np.all(np.isfinite(step[0])) and np.all(np.isfinite(step[1]))):
            status = "numerical_failure"
            break
        dx, dlam, dz, dmu = step
        ap = _max_step(it.z, dz, st.step_to_boundary)
        ad = _max_step(it.mu, dmu, st.step_to_boundary)
        if ap < st.min_step or ad < st.min_step:
            # a vanishing step far from feasibility: the usual sign of an infeasible problem
            status = "infeasible" if feas > st.feasibility_tol else "numerical_failure"
            break
        x = it.x + ap * dx
        f_prev = it.f
        f, g, h = problem.evaluate(x)
        it = _Iterate(x=x, z=it.z + ap * dz, mu=it.mu + ad * dmu, lam=it.lam + ad * dlam, f=f, g=g,
                      hb=np.concatenate([h, bounds.values(x)]))
        if n_in:
            gamma = max(st.centering * float(it.z @ it.mu) / n_in, floor)
    return _outcome(it, bounds, n_h, status, k, conds)
