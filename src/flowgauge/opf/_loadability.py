"""Maximum loadability: the largest scale factor of a load direction that the network can
carry, solved as its own optimisation (maximise ``lam`` subject to the AC-OPF constraints
with loads ``base + lam * direction`` and the dispatch free)."""

from __future__ import annotations

import time

import numpy as np

from ..errors import InputError
from ..network._model import Network
from ._acmodel import ACModel
from ._pdipm import interior_point
from ._report import point_report
from ._result import LoadabilityResult, check_loads
from ._settings import STATUS_MESSAGES, OPFSettings

__all__ = ["max_loadability", "FALLBACK_WEIGHT_FACTOR"]

# A run that does not converge is repeated once with the dispatch weight times this factor.
FALLBACK_WEIGHT_FACTOR = 100.0


def max_loadability(net: Network, pd_mw=None, qd_mvar=None, dir_pd_mw=None, dir_qd_mvar=None,
                    settings: OPFSettings | None = None) -> LoadabilityResult:
    """Largest ``lam`` such that loads ``pd_mw + lam * dir_pd_mw``, ``qd_mvar + lam * dir_qd_mvar``
    (each shape (n_load,) [MW], [MVAr]) still admit a point meeting every AC-OPF constraint.

    Base loads default to the network's own, the direction to the base loads (a uniform
    scaling, so the total load is ``(1 + lam)`` times the base). Generator costs are not used.
    ``lam`` is the optimum ``lam_limit`` backed off by ``OPFSettings.loadability_backoff``
    (relative), since at the limit itself the feasible set can have no interior; the
    operating point and binding limits are those at ``lam_limit``.
    A run that does not converge is repeated once with ``loadability_dispatch_weight`` times
    :data:`FALLBACK_WEIGHT_FACTOR` (``iterations`` counts both).
    A negative ``lam`` means the base loading itself cannot be carried. Returns a
    :class:`LoadabilityResult`; failure to converge is a status, not an exception.
    """
    st = settings or OPFSettings()
    pd = check_loads(net, pd_mw, "pd_mw", net.pd_mw)
    qd = check_loads(net, qd_mvar, "qd_mvar", net.qd_mvar)
    dpd = check_loads(net, dir_pd_mw, "dir_pd_mw", pd)
    dqd = check_loads(net, dir_qd_mvar, "dir_qd_mvar", qd)
    if not (np.any(dpd != 0.0) or np.any(dqd != 0.0)):
        raise InputError("the direction of load increase is zero everywhere; give a non-zero "
                         "direction", where="dir_pd_mw")
    t0 = time.perf_counter()
    iterations = 0
    for weight in (st.loadability_dispatch_weight, FALLBACK_WEIGHT_FACTOR * st.loadability_dispatch_weight):
        # the dispatch weight only picks one dispatch among the many reaching the same scale
        # factor; where the small default leaves the problem too flat to converge (the 200-bus
        # ACTIVSg system: 150 iterations, still 8e-4 p.u. from feasible), a run with a larger
        # weight converges (27 iterations there); a run that converges first is never repeated
        model = ACModel(net, loadability=True, dispatch_weight=weight)
        model.set_loads(pd, qd, dpd, dqd)
        out = interior_point(model, model.start_point(), st)
        iterations += out.iterations
        if out.status == "converged":
            break
    seconds = time.perf_counter() - t0
    rep = point_report(model, out.x, st.binding_tol)
    lam_limit = float(model.x_full[model.i_lam])
    # At the limit itself the feasible set has no interior (e.g. every generator at Pmax);
    # a tiny relative back-off gives a loading the AC-OPF solves.
    lam = lam_limit - st.loadability_backoff * abs(lam_limit)
    return LoadabilityResult(
        status=out.status, message=STATUS_MESSAGES[out.status], lam=lam, lam_limit=lam_limit,
        pd_mw=pd + lam * dpd, qd_mvar=qd + lam * dqd, pg_mw=rep.pg_mw, qg_mvar=rep.qg_mvar,
        vm_pu=rep.vm_pu, va_deg=rep.va_deg, binding=rep.binding, signature=rep.signature,
        iterations=iterations, seconds=seconds, max_p_mismatch_mw=rep.max_p_mismatch_mw,
        max_q_mismatch_mvar=rep.max_q_mismatch_mvar, max_limit_violation=rep.max_limit_violation,
        violations=rep.violations)
