"""The reference proxies every board starts with: ``dc-opf``, ``nearest`` and ``linear``.

Each maps a split's loads (n_samples, n_load) to predictions shaped like the split's
references; the learned ones are fitted on the ``train`` split of the same network.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ..network import Network

__all__ = ["Prediction", "dc_opf", "nearest", "linear", "network_voltage_setpoints", "RIDGE_ALPHA"]

# Ridge penalty on standardised loads: small enough to follow the data, large enough to keep the
# normal equations well conditioned when loads move together (common practice).
RIDGE_ALPHA = 1.0


@dataclass(frozen=True, eq=False)
class Prediction:
    """Arrays of one baseline's predictions: ``pg_mw`` (S, n_gen) [MW], ``vm_pu`` (S, n_bus)
    [p.u.], ``va_deg`` (S, n_bus) [deg] or None, ``qg_mvar`` (S, n_gen) [MVAr] or None."""

    pg_mw: np.ndarray
    vm_pu: np.ndarray
    va_deg: np.ndarray | None
    qg_mvar: np.ndarray | None


def network_voltage_setpoints(net: Network) -> np.ndarray:
    """Voltage magnitude per bus, shape (n_bus,) [p.u.]: each generator bus at its (first)
    generator's setpoint, every other bus at the network's stored voltage, each held within its
    bus's limits (some published cases store setpoints above the limits added to them later)."""
    vm = np.asarray(net.vm_pu, float).copy()
    idx = net.gen_bus_idx
    first = np.unique(idx, return_index=True)[1]
    vm[idx[first]] = np.asarray(net.vg_pu, float)[first]
    return np.clip(vm, net.vmin_pu, net.vmax_pu)


def _bounded_dispatch(net: Network, load_mw: float) -> np.ndarray:
    """Every generator at the same share of its range that matches ``load_mw`` as closely as the
    limits allow: all at minimum below the summed minimum (a light loading the lossless DC model
    cannot balance while the AC network, with its losses, can), all at maximum above the sum."""
    lo, hi = np.asarray(net.pmin_mw, float), np.asarray(net.pmax_mw, float)
    span = float(np.sum(hi - lo))
    share = 0.0 if span <= 0 else min(1.0, max(0.0, (load_mw - float(np.sum(lo))) / span))
    return lo + share * (hi - lo)


def _unlimited(net: Network) -> Network:
    """``net`` without branch and angle limits (the DC-OPF's economic-dispatch fallback)."""
    return net.replace(rate_mva=np.full(net.n_branch, np.nan), angmin_deg=np.full(net.n_branch, -360.0),
                       angmax_deg=np.full(net.n_branch, 360.0))


def dc_opf(net: Network, pd_mw: np.ndarray, sample_id: np.ndarray, progress=None, *,
           branch_in_service=None, gen_in_service=None, shunt_in_service=None) -> Prediction:
    """The DC-OPF dispatch of each sample, with the network's voltage setpoints (within limits);
    where the DC-OPF is infeasible, the same without branch and angle limits (an economic
    dispatch), and where that is infeasible too, :func:`_bounded_dispatch`. ``progress(done,
    total)`` is called after each sample, if given.

    ``branch_in_service`` (S, n_branch) and ``gen_in_service`` (S, n_gen) bool, optional: each
    sample's network state; the samples are grouped by state and each is solved on its state
    network (:func:`flowgauge.network.network_in_state`: lines out carry nothing, generators
    out are held at 0; ``shunt_in_service`` (S, n_bus), optional, with them: bus shunts out hold no
    conductance). The voltage setpoints are the intact network's."""
    from ..opf import solve_dcopf

    pd = np.asarray(pd_mw, float)
    n = pd.shape[0]
    pg = np.empty((n, net.n_gen))
    if branch_in_service is None:
        groups = [(net, np.arange(n))]
    else:
        from ..network import group_states, network_in_state
        more = () if shunt_in_service is None else (shunt_in_service,)
        ub, ug, *us, group = group_states(branch_in_service, gen_in_service, *more)
        sid = np.asarray(sample_id)
        groups = []
        for k in range(ub.shape[0]):
            rows = np.flatnonzero(group == k)
            groups.append((network_in_state(net, ub[k], ug[k], sample=sid[rows[0]].item(),
                                            shunt_in_service=us[0][k] if us else None), rows))
    done = 0
    for state_net, rows in groups:
        # Where the DC model has no feasible dispatch (a loading the AC network carries can break
        # the DC model's branch or angle limits), the baseline drops the branch limits: an
        # economic dispatch of the same generators and costs.
        unlimited = _unlimited(state_net)
        for i in rows.tolist():  # one linear programme per sample
            res = solve_dcopf(state_net, pd_mw=pd[i])
            if str(res.status) != "converged":
                res = solve_dcopf(unlimited, pd_mw=pd[i])
            out = np.asarray(res.pg_mw, float)
            if str(res.status) != "converged" or not np.all(np.isfinite(out)):
                out = _bounded_dispatch(state_net, float(pd[i].sum()))
            pg[i] = out
            done += 1
            if progress is not None:
                progress(done, n)
    vm = np.broadcast_to(network_voltage_setpoints(net), (n, net.n_bus)).copy()
    return Prediction(pg_mw=pg, vm_pu=vm, va_deg=None, qg_mvar=None)


def _features(pd_mw, qd_mvar) -> np.ndarray:
    return np.hstack([np.asarray(pd_mw, float), np.asarray(qd_mvar, float)])


def _targets(refs) -> tuple[np.ndarray, list[int]]:
    parts = [np.asarray(refs.pg_mw, float), np.asarray(refs.vm_pu, float), np.asarray(refs.va_deg, float),
             np.asarray(refs.qg_mvar, float)]
    return np.hstack(parts), np.cumsum([p.shape[1] for p in parts])[:-1].tolist()


def _unpack(y: np.ndarray, cuts: list[int]) -> Prediction:
    pg, vm, va, qg = np.split(y, cuts, axis=1)
    return Prediction(pg_mw=pg, vm_pu=vm, va_deg=va, qg_mvar=qg)


def nearest(train, pd_mw, qd_mvar) -> Prediction:
    """The reference solution of the training sample whose loads (MW and MVAr, Euclidean
    distance) are nearest to each sample's; ties go to the lowest sample position."""
    y, cuts = _targets(train.references)
    tree = cKDTree(_features(train.pd_mw, train.qd_mvar))
    _, idx = tree.query(_features(pd_mw, qd_mvar), k=1)
    return _unpack(y[np.asarray(idx)], cuts)


def linear(train, pd_mw, qd_mvar, *, alpha: float = RIDGE_ALPHA) -> Prediction:
    """Ridge regression from the standardised loads to ``pg_mw``, ``vm_pu``, ``va_deg`` and
    ``qg_mvar``, fitted on the training split (closed form, intercept not penalised); outputs
    projected onto the elements' limits (angles onto +-180 degrees)."""
    x = _features(train.pd_mw, train.qd_mvar)
    y, cuts = _targets(train.references)
    mu, sd = x.mean(axis=0), x.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    z = (x - mu) / sd
    ymu = y.mean(axis=0)
    w = np.linalg.solve(z.T @ z + alpha * np.eye(z.shape[1]), z.T @ (y - ymu))
    zq = (_features(pd_mw, qd_mvar) - mu) / sd
    pred = _unpack(zq @ w + ymu, cuts)
    # far outside the training loadings a linear map extrapolates past every limit (even to
    # negative voltages): outputs are projected onto their elements' limits, as regression
    # proxies commonly are
    net = getattr(train, "network", None)
    if net is None:  # arrays without a network: nothing to project onto
        return pred
    return Prediction(pg_mw=np.clip(pred.pg_mw, net.pmin_mw, net.pmax_mw),
                      vm_pu=np.clip(pred.vm_pu, net.vmin_pu, net.vmax_pu),
                      va_deg=np.clip(pred.va_deg, -180.0, 180.0),
                      qg_mvar=np.clip(pred.qg_mvar, net.qmin_mvar, net.qmax_mvar))
