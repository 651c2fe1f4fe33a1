"""The one network type: columnar numpy arrays for buses, loads, generators and branches.

Field names carry units. Powers are in MW / MVAr / MVA, angles in degrees, impedances
and voltages in per unit on ``base_mva``; the physics converts to per unit and radians
once, on entry. Element order is the order of these arrays; every file follows it.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace
from functools import cached_property
from typing import Any

import numpy as np

__all__ = ["Network", "BUS_PQ", "BUS_PV", "BUS_REF", "BUS_TYPE_NAMES"]

# Bus type codes as in the IEEE Common Data Format.
BUS_PQ = 1
BUS_PV = 2
BUS_REF = 3
BUS_TYPE_NAMES = {BUS_PQ: "PQ", BUS_PV: "PV", BUS_REF: "reference"}


@dataclass(frozen=True, eq=False)
class Network:
    """A transmission network.

    Buses, shape (n_bus,): ``bus_id`` (int, unique), ``bus_type`` (1 PQ, 2 PV, 3 reference),
    ``vmin_pu``, ``vmax_pu``, ``base_kv`` [kV], ``gs_mw``, ``bs_mvar`` (shunt conductance and
    susceptance, as MW / MVAr consumed / injected at 1.0 p.u. voltage), ``vm_pu``, ``va_deg``
    (initial or published solved voltage).

    Loads, shape (n_load,): ``load_id``, ``load_bus`` (a bus id), ``pd_mw``, ``qd_mvar``.

    Generators, shape (n_gen,): ``gen_id``, ``gen_bus`` (a bus id), ``pmin_mw``, ``pmax_mw``,
    ``qmin_mvar``, ``qmax_mvar``, ``vg_pu`` (voltage setpoint), ``pg_mw``, ``qg_mvar``
    (initial dispatch), ``cost_c2`` [$/MW^2/h], ``cost_c1`` [$/MWh], ``cost_c0`` [$/h]; all
    three cost arrays are NaN when the network carries no costs.

    Branches, shape (n_branch,): ``branch_id``, ``from_bus``, ``to_bus`` (bus ids), ``r_pu``,
    ``x_pu``, ``b_pu`` (total line charging), ``rate_mva`` (NaN: no thermal limit), ``tap``
    (off-nominal ratio, 1.0 for a line), ``shift_deg``, ``angmin_deg``, ``angmax_deg``
    (-360 / 360: no limit), ``in_service`` (bool).

    ``provenance``: where the data came from (source, version, licence, notes).
    """

    name: str
    base_mva: float
    # buses
    bus_id: np.ndarray
    bus_type: np.ndarray
    vmin_pu: np.ndarray
    vmax_pu: np.ndarray
    base_kv: np.ndarray
    gs_mw: np.ndarray
    bs_mvar: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray
    # loads
    load_id: np.ndarray
    load_bus: np.ndarray
    pd_mw: np.ndarray
    qd_mvar: np.ndarray
    # generators
    gen_id: np.ndarray
    gen_bus: np.ndarray
    pmin_mw: np.ndarray
    pmax_mw: np.ndarray
    qmin_mvar: np.ndarray
    qmax_mvar: np.ndarray
    vg_pu: np.ndarray
    pg_mw: np.ndarray
    qg_mvar: np.ndarray
    cost_c2: np.ndarray
    cost_c1: np.ndarray
    cost_c0: np.ndarray
    # branches
    branch_id: np.ndarray
    from_bus: np.ndarray
    to_bus: np.ndarray
    r_pu: np.ndarray
    x_pu: np.ndarray
    b_pu: np.ndarray
    rate_mva: np.ndarray
    tap: np.ndarray
    shift_deg: np.ndarray
    angmin_deg: np.ndarray
    angmax_deg: np.ndarray
    in_service: np.ndarray
    provenance: dict[str, Any] = field(default_factory=dict)

    # ---- sizes -------------------------------------------------------------
    @property
    def n_bus(self) -> int:
        return int(self.bus_id.shape[0])

    @property
    def n_load(self) -> int:
        return int(self.load_id.shape[0])

    @property
    def n_gen(self) -> int:
        return int(self.gen_id.shape[0])

    @property
    def n_branch(self) -> int:
        return int(self.branch_id.shape[0])

    @property
    def has_costs(self) -> bool:
        return bool(np.all(np.isfinite(self.cost_c1)))

    # ---- positions (0-based indices into the bus arrays) --------------------
    @cached_property
    def _bus_pos(self) -> dict[int, int]:
        return {int(b): i for i, b in enumerate(self.bus_id.tolist())}

    def bus_index(self, ids: np.ndarray) -> np.ndarray:
        """Positions of the given bus ids in the bus arrays, shape like ``ids``."""
        pos = self._bus_pos
        return np.fromiter((pos[int(b)] for b in np.ravel(ids)), dtype=np.int64, count=np.size(ids)).reshape(np.shape(ids))

    @cached_property
    def load_bus_idx(self) -> np.ndarray:
        return self.bus_index(self.load_bus)

    @cached_property
    def gen_bus_idx(self) -> np.ndarray:
        return self.bus_index(self.gen_bus)

    @cached_property
    def f_idx(self) -> np.ndarray:
        return self.bus_index(self.from_bus)

    @cached_property
    def t_idx(self) -> np.ndarray:
        return self.bus_index(self.to_bus)

    @cached_property
    def ref_idx(self) -> np.ndarray:
        """Positions of reference buses (one per island)."""
        return np.flatnonzero(self.bus_type == BUS_REF)

    @cached_property
    def pv_idx(self) -> np.ndarray:
        return np.flatnonzero(self.bus_type == BUS_PV)

    @cached_property
    def pq_idx(self) -> np.ndarray:
        return np.flatnonzero(self.bus_type == BUS_PQ)

    # ---- copies ------------------------------------------------------------
    def with_loads(self, pd_mw: np.ndarray, qd_mvar: np.ndarray) -> "Network":
        """A copy with new load values (shape (n_load,))."""
        return replace(self, pd_mw=np.asarray(pd_mw, float).copy(), qd_mvar=np.asarray(qd_mvar, float).copy())

    def replace(self, **changes: Any) -> "Network":
        return replace(self, **changes)

    @classmethod
    def array_fields(cls) -> list[str]:
        return [f.name for f in fields(cls) if f.name not in ("name", "base_mva", "provenance")]

    def total_load_mw(self) -> float:
        return float(np.sum(self.pd_mw))
