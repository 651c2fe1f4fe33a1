"""Reference solvers: AC optimal power flow by a primal-dual interior-point method, DC optimal
power flow and maximum loadability.

    from flowgauge.opf import ACOPF, OPFSettings
    solver = ACOPF(net, OPFSettings())           # once per network
    res = solver.solve(pd_mw, qd_mvar)           # loads shape (n_load,) [MW], [MVAr]
"""

from ._acopf import ACOPF, solve_acopf
from ._dcopf import DCOPFResult, solve_dcopf
from ._loadability import max_loadability
from ._result import LIMIT_NAMES, LoadabilityResult, OPFResult
from ._settings import STATUS_MESSAGES, STATUSES, OPFSettings

__all__ = ["ACOPF", "OPFSettings", "OPFResult", "LoadabilityResult", "STATUSES", "STATUS_MESSAGES",
           "LIMIT_NAMES", "solve_acopf", "max_loadability", "solve_dcopf", "DCOPFResult"]
