"""Per-network data shared by every solve (cached), input checking and injections."""

from __future__ import annotations

import weakref
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.csgraph as csgraph
import scipy.sparse.linalg as spla

from ..errors import InputError
from ..network._model import Network
from ..physics import Admittance, JacobianPattern, admittance, dc_matrices

__all__ = ["Prepared", "prepared", "stack_input", "bus_injection_setpoints"]


# Jacobian patterns kept per network besides its own (least recently used dropped first)
KEPT_PATTERNS = 8


@dataclass(eq=False)
class Prepared:
    """Data of one network that do not depend on the sample.

    ``pv``/``pq``: solver bus types (a PV bus without a generator counts as PQ, as in the
    IEEE Common Data Format convention); ``island`` (n_bus,): island label of each bus;
    ``ref_gen`` (n_ref,): the generator taking the balance at each reference bus (-1: none): the
    first in service there (four limits not all 0), else the first.
    ``injection`` (n_bus, n_gen + n_load): [cg, -cl] / base_mva, maps [generation, load]
    [MW] to the bus injection [p.u.]; ``branch_currents`` (2 n_branch, n_bus): [yf; yt];
    ``gens_fixed_q`` (n_gen,): generators at PQ buses, whose reactive output is a setpoint.
    """

    net: Network
    adm: Admittance
    ref: np.ndarray
    pv: np.ndarray
    pq: np.ndarray
    island: np.ndarray
    ref_gen: np.ndarray
    gens_at_bus: np.ndarray
    bbus: sp.csr_matrix
    bf: sp.csr_matrix
    pbusinj: np.ndarray
    pfinj: np.ndarray
    injection: sp.csr_matrix
    branch_currents: sp.csr_matrix
    gens_fixed_q: np.ndarray
    _patterns: dict = field(default_factory=dict)
    _dc_lu: object = None

    def pattern(self, pv: np.ndarray, pq: np.ndarray) -> JacobianPattern:
        """The Jacobian pattern of these bus types. The network's own pattern is kept; of the
        others (reactive-limit rounds, ``_switching``) the :data:`KEPT_PATTERNS` used last,
        with the LU data cached on them (a process scoring many chunks meets new ones in every
        chunk). A pattern built again is the same, so what is kept changes no result."""
        key = (pv.tobytes(), pq.tobytes())
        pat = self._patterns.pop(key, None)
        if pat is None:
            pat = JacobianPattern(self.adm.ybus, pv, pq)
        self._patterns[key] = pat  # most recently used last
        own = (self.pv.tobytes(), self.pq.tobytes())
        others = [k for k in self._patterns if k != own]
        for k in others[:max(0, len(others) - KEPT_PATTERNS)]:
            del self._patterns[k]
        return pat

    @property
    def nonref(self) -> np.ndarray:
        return np.setdiff1d(np.arange(self.net.n_bus), self.ref)

    def dc_lu(self):
        """Sparse LU of the DC susceptance matrix without the reference rows and columns."""
        if self._dc_lu is None:
            nr = self.nonref
            try:
                self._dc_lu = spla.splu(sp.csc_matrix(self.bbus[nr][:, nr]))
            except RuntimeError:
                raise InputError("the DC susceptance matrix is singular (a bus or island is not "
                                 "connected to a reference bus)", where=self.net.name) from None
        return self._dc_lu


_CACHE: "weakref.WeakKeyDictionary[Network, Prepared]" = weakref.WeakKeyDictionary()


def prepared(net: Network) -> Prepared:
    """The cached :class:`Prepared` data of ``net`` (networks are immutable)."""
    p = _CACHE.get(net)
    if p is None:
        p = _prepare(net)
        _CACHE[net] = p
    return p


def _prepare(net: Network) -> Prepared:
    nb, ng = net.n_bus, net.n_gen
    adm = admittance(net)
    gbus = net.gen_bus_idx
    gens_at_bus = np.bincount(gbus, minlength=nb)
    ref = net.ref_idx
    if ref.size == 0:
        raise InputError("the network has no reference bus (bus_type 3)", where=f"{net.name}: bus_type")
    pv = np.flatnonzero((net.bus_type == 2) & (gens_at_bus > 0))
    pq = np.flatnonzero((net.bus_type != 3) & ~np.isin(np.arange(nb), pv))
    on = np.asarray(net.in_service, bool)
    graph = sp.csr_matrix((np.ones(int(on.sum())), (net.f_idx[on], net.t_idx[on])), shape=(nb, nb))
    _, island = csgraph.connected_components(graph, directed=False)
    # the first generator (in network order) at each reference bus that is in service: one out of
    # service (network_in_state: its four limits 0) takes no balance (docs/topology.md); where
    # every generator at the bus has four zero limits, the first of them
    first = np.full(nb, ng)
    np.minimum.at(first, gbus, np.arange(ng))
    live = ~((net.pmin_mw == 0) & (net.pmax_mw == 0) & (net.qmin_mvar == 0) & (net.qmax_mvar == 0))
    first_live = np.full(nb, ng)
    np.minimum.at(first_live, gbus[live], np.flatnonzero(live))
    first = np.where(first_live < ng, first_live, first)
    ref_gen = np.where(first[ref] < ng, first[ref], -1)
    bbus, bf, pbusinj, pfinj = dc_matrices(net)
    injection = sp.hstack([adm.cg, -adm.cl]).tocsr() / net.base_mva
    branch_currents = sp.vstack([adm.yf, adm.yt]).tocsr()
    return Prepared(net=net, adm=adm, ref=ref, pv=pv, pq=pq, island=island, ref_gen=ref_gen,
                    gens_at_bus=gens_at_bus, bbus=bbus, bf=bf, pbusinj=pbusinj, pfinj=pfinj,
                    injection=injection, branch_currents=branch_currents,
                    gens_fixed_q=~np.isin(gbus, np.r_[pv, ref]))


def stack_input(name: str, value, default: np.ndarray, n: int, n_samples: int | None) -> np.ndarray:
    """``value`` (or ``default`` when None) as a float array of shape (n_samples, n).

    ``n_samples`` None: a single solve, ``value`` must have shape (n,). Raises
    :class:`InputError` naming ``name`` for a wrong shape or a non-finite entry.
    """
    rows = 1 if n_samples is None else n_samples
    if value is None:
        return np.broadcast_to(np.asarray(default, float), (rows, n)).copy()
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"expected an array of numbers, got {type(value).__name__}", where=name) from None
    want = (n,) if n_samples is None else (n_samples, n)
    if arr.shape != want:
        raise InputError(f"expected shape {want}, got {arr.shape}", where=name)
    bad = np.argwhere(~np.isfinite(arr))
    if bad.size:
        raise InputError(f"non-finite value at index {tuple(int(i) for i in bad[0])}", where=name)
    return arr.reshape(rows, n)


def bus_injection_setpoints(p: Prepared, pg_mw, qg_mvar, pd_mw, qd_mvar) -> np.ndarray:
    """Specified complex injection (generation - load) per bus, shape (S, n_bus) [p.u.]."""
    s = np.concatenate([pg_mw + 1j * qg_mvar, pd_mw + 1j * qd_mvar], axis=1)
    return np.ascontiguousarray((p.injection @ s.T).T)
