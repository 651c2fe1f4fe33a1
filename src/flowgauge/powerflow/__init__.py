"""AC power flow (Newton-Raphson, single and batched) and DC power flow."""

from ._ac import INITS, default_vm_pu, solve_powerflow, solve_powerflow_batch
from ._dc import solve_dc_powerflow
from ._result import BatchPowerFlowResult, DCPowerFlowResult, PowerFlowResult
from ._status import STATUSES

__all__ = [
    "solve_powerflow", "solve_powerflow_batch", "solve_dc_powerflow", "PowerFlowResult",
    "BatchPowerFlowResult", "DCPowerFlowResult", "STATUSES", "INITS", "default_vm_pu",
]
