"""The spanning design: loadings spread over the whole feasible region of a network, not a box
around its base case, and the design of loadings outside what it produces. docs/splits.md
argues their coverage.

A **plain draw** picks a direction in load space and a distance along it:

* each load's active power weight is its base power (a tenth of the mean base load for a load
  with none) times an independent Gamma(k, 1/k) factor; the shape k is drawn per sample,
  log-uniform in ``concentration``: a small k gives loadings where a few loads dominate and the
  others fall toward zero, a large k loadings close to the base pattern;
* each load's power factor is drawn in ``power_factor`` (lagging; a load whose base reactive
  power is negative keeps that sign): common practice puts load power factors between 0.85 and
  1.0;
* the direction's feasible extent comes from the maximum-loadability solver, started at
  ``start_share`` of the base total load along the direction; the loading is a share of that
  extent drawn uniformly in ``fraction``, which covers light loadings, the interior and the
  approach to the boundary (the last half percent is left to the edge split). The lower end of
  ``fraction`` is fitted per network (:meth:`Spanning.fitted`): the lightest share, among
  0.05, 0.1, 0.2, 0.3 and 0.4 (then 0.5 to 0.8 where none of those works), at which the base
  load pattern has a feasible AC optimal power flow. Some networks cannot carry light loadings: their line charging raises voltages beyond
  what the generators' reactive ranges can absorb.

A **steered draw** moves toward rarely seen binding-limit regimes. When the design is fitted to
a network it solves a pilot of plain draws (a fixed seed of its own, so every split of the
network shares it) and weights each pilot loading by the inverse of how often its regime
occurs in the pilot. A steered draw picks a pilot loading by that weight and takes a random
local step from it: every load weight multiplied by exp(``step_sigma`` N(0, 1)), power factors
and the share of the extent moved by small normal steps. A share ``steer_share`` of the samples
is steered (sample slots with ``slot % 2 == 1``).

Every draw depends only on (seed, slot, attempt) and the pilot, so the worker count never
changes a split.
"""

from __future__ import annotations

import zipfile
from collections import Counter
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, ClassVar

import numpy as np

from .._io import canonical_json, hash_arrays, sha256_hex
from ..errors import InputError
from ..network import Network
from ._designs import Loading, sample_rng

__all__ = ["Spanning", "Outside", "regime_families", "FAMILY_OF_LIMIT"]

# binding-limit label suffix -> limit family (labels: "<bus|gen|branch>:<id>:<limit>")
FAMILY_OF_LIMIT = {"vmin": "voltage", "vmax": "voltage", "pmin": "active_power", "pmax": "active_power",
                   "qmin": "reactive_power", "qmax": "reactive_power", "rate_from": "thermal",
                   "rate_to": "thermal", "angmin": "angle", "angmax": "angle"}


_PILOTS: dict = {}  # fitted fraction and pilot by (network hash, settings), within one process
LIGHT_SHARES = (0.05, 0.1, 0.2, 0.3, 0.4)
# Tried only when none of LIGHT_SHARES is feasible: networks whose generators' summed minimum
# outputs are a large share of the base load (the 200-bus ACTIVSg system: 86 %) cannot carry
# light loadings at all, since the optimal power flow does not switch units off.
HEAVY_SHARES = (0.5, 0.6, 0.7, 0.8)
# Networks above LARGE_NETWORK_BUSES solve a smaller pilot: there nearly every loading has a
# binding-limit regime of its own, so the pilot's inverse-frequency weights are flat and the
# pilot serves only as a set of feasible starting directions; 200 draws would cost hours.
LARGE_NETWORK_BUSES = 1000
LARGE_PILOT_DRAWS = 40


def regime_families(binding) -> set[str]:
    """The limit families among a sample's binding-limit labels."""
    return {FAMILY_OF_LIMIT[b.rsplit(":", 1)[-1]] for b in binding if b.rsplit(":", 1)[-1] in FAMILY_OF_LIMIT}


def _loguniform(rng, lo_hi):
    return float(np.exp(rng.uniform(np.log(lo_hi[0]), np.log(lo_hi[1]))))


def _base_weights(net: Network) -> np.ndarray:
    p = np.abs(net.pd_mw)
    floor = 0.1 * float(p.mean()) if p.size and p.mean() > 0 else 1.0
    return np.where(p > 0, p, floor)


def _reactive(net: Network, pd: np.ndarray, pf: np.ndarray, leading=None) -> np.ndarray:
    """Reactive power of loads ``pd`` at power factors ``pf``: lagging (the sign of the base
    reactive power), except where ``leading`` is True (the opposite sign)."""
    sign = np.where(net.qd_mvar < 0, -1.0, 1.0)
    if leading is not None:
        sign = np.where(leading, -sign, sign)
    return pd * np.tan(np.arccos(np.clip(pf, 1e-3, 1.0))) * sign


def pilot_row(design: "Spanning", net: Network, tools, slot: int):
    """Pilot draw ``slot`` of ``design`` (its fraction fitted): ``(w, pf, frac, regime)`` of a
    plain draw whose AC optimal power flow converged, or None."""
    loading, (w, pf, frac) = design.plain(net, sample_rng(design.pilot_seed, slot, 0), tools)
    if isinstance(loading, str):
        return None
    res = tools.solve(loading.pd_mw, loading.qd_mvar)
    if res.status != "converged":
        return None
    return w, pf, frac, str(res.signature)


def pilot_draw(net: Network, net_hash: str, design: "Spanning", slot: int):
    """:func:`pilot_row` with this process's solvers (a task of the build's executor)."""
    from ._worker import make_tools
    return pilot_row(design, net, make_tools(net, net_hash), slot)


def _pilot_arrays(weights, power_factor, fraction, regime) -> dict:
    """The pilot: its loadings' arrays and the inverse-frequency weight of each one's regime."""
    count = Counter(regime.tolist())
    weight = np.array([1.0 / count[r] for r in regime.tolist()])
    return {"weights": weights, "power_factor": power_factor, "fraction": fraction, "regime": regime,
            "probability": weight / weight.sum()}


_PILOT_ARRAYS = ("weights", "power_factor", "fraction", "regime")


def _write_fitted(path: Path, key_text: str, fraction: tuple, pilot: dict) -> None:
    from ._worker import write_chunk
    arrays = {k: pilot[k] for k in _PILOT_ARRAYS}
    arrays["fitted_fraction"] = np.array(fraction, float)
    arrays["key"] = np.array(key_text)
    write_chunk(path, {**arrays, "hash": np.array(hash_arrays(arrays))})


def _read_fitted(path: Path, key_text: str):
    """(fraction, pilot) kept by :func:`_write_fitted` for ``key_text``, or None if absent,
    unreadable, altered or kept for another key."""
    from ._worker import read_chunk
    try:
        arrays = read_chunk(path)
        recorded = str(arrays.pop("hash"))
    except (OSError, EOFError, ValueError, KeyError, zipfile.BadZipFile):
        return None
    if (set(arrays) != {*_PILOT_ARRAYS, "fitted_fraction", "key"} or hash_arrays(arrays) != recorded
            or str(arrays["key"]) != key_text):
        return None
    fraction = tuple(float(x) for x in arrays["fitted_fraction"])
    return fraction, _pilot_arrays(*(arrays[k] for k in _PILOT_ARRAYS))


@dataclass(frozen=True, eq=False)
class Spanning:
    """Directions in load space and distances along them over the feasible region (module
    docstring); ``pilot`` is filled by :meth:`fitted`."""

    uses_slot: ClassVar[bool] = True
    solves_pilot: ClassVar[bool] = True  # fitted(net, run=..., store=...)
    name: str = "spanning"
    concentration: tuple[float, float] = (0.3, 10.0)
    power_factor: tuple[float, float] = (0.85, 1.0)
    fraction: tuple[float, float] = (0.05, 0.995)
    start_share: float = 0.5
    steer_share: float = 0.5
    pilot_draws: int = 200
    pilot_seed: int = 20261202
    step_sigma: float = 0.35
    pf_step: float = 0.02
    fraction_step: float = 0.05
    pilot: dict | None = field(default=None, repr=False)

    # -- the plain draw -------------------------------------------------------------------
    def _direction(self, net: Network, rng) -> tuple[np.ndarray, np.ndarray]:
        k = _loguniform(rng, self.concentration)
        w = _base_weights(net) * rng.gamma(k, 1.0 / k, net.n_load)
        pf = rng.uniform(self.power_factor[0], self.power_factor[1], net.n_load)
        return w, pf

    def _along(self, net: Network, w, pf, frac, solver, kind: str, leading=None) -> Loading | str:
        total = float(np.sum(np.abs(net.pd_mw))) or 1.0
        d_pd = w * (total / float(np.sum(w)))  # the direction, scaled to the base total load
        d_qd = _reactive(net, d_pd, pf, leading)
        s0 = self.start_share
        # the start may lie beyond the limit (a negative lam scales it back)
        lam = solver.max_loadability(s0 * d_pd, s0 * d_qd, d_pd, d_qd, allow_negative=True)
        if isinstance(lam, str):
            return lam
        extent = s0 + lam
        if extent <= 0:
            return "loadability-no-feasible-load"
        return Loading(frac * extent * d_pd, frac * extent * d_qd, kind=kind)

    def plain(self, net: Network, rng, solver) -> tuple[Loading | str, tuple]:
        w, pf = self._direction(net, rng)
        frac = float(rng.uniform(*self.fraction))
        return self._along(net, w, pf, frac, solver, "spanning"), (w, pf, frac)

    # -- the pilot and the steered draw ---------------------------------------------------
    def fitted(self, net: Network, solver=None, run=None, store: Path | None = None,
               pilot: dict | None = None) -> "Spanning":
        """The design placed on ``net``: the lower end of ``fraction`` fitted
        (:meth:`lightest_share`) and the pilot solved (:meth:`_pilot`); or, with ``pilot`` (a
        :meth:`pilot_record`, as a recipe keeps it), placed as that record says, nothing solved.

        ``run(fn, tasks)``: where the pilot's draws run (the build's executor: local worker
        processes or a Dask cluster, yielding ``(task, result)`` in any order); None: here, one
        after another. ``store``: a folder where the fitted design is kept
        (``pilot-<key>.npz``), so that a resumed build does not solve its pilot again; a file
        there that is unreadable or does not match its recorded hash is solved again. Neither
        changes the result: every pilot draw depends only on its slot."""
        if self.pilot is not None:
            return self
        if pilot is not None:
            return self.with_pilot_record(net, pilot)
        if net.n_bus > LARGE_NETWORK_BUSES and self.pilot_draws > LARGE_PILOT_DRAWS:
            return replace(self, pilot_draws=LARGE_PILOT_DRAWS).fitted(net, solver, run, store)
        from ._manifest import network_hash
        from ._worker import _Tools
        net_hash = network_hash(net)
        key = (net_hash, self.pilot_draws, self.pilot_seed, self.concentration, self.power_factor,
               self.fraction, self.start_share)
        key_text = canonical_json(list(key)).decode()
        path = None if store is None else Path(store) / f"pilot-{sha256_hex(key_text.encode())[:16]}.npz"
        if key not in _PILOTS:  # every split of a network in one process shares its pilot
            kept = None if path is None else _read_fitted(path, key_text)
            if kept is None:
                tools = solver or _Tools(net)
                fitted = replace(self, fraction=(self.lightest_share(net, tools), self.fraction[1]))
                kept = (fitted.fraction, fitted._pilot(net, tools, run, net_hash))
            _PILOTS[key] = kept
        if path is not None and _read_fitted(path, key_text) is None:  # absent or damaged: (re)write
            _write_fitted(path, key_text, *_PILOTS[key])
        fraction, pilot = _PILOTS[key]
        return replace(self, fraction=fraction, pilot=pilot)

    def pilot_record(self, net: Network) -> dict[str, Any]:
        """The fitted design's outcome of solving, as a recipe keeps it: the fitted ``fraction``,
        the number of pilot draws, and per kept pilot draw its slot and regime. Everything else
        in the pilot follows from the slot's random draws (:meth:`with_pilot_record`)."""
        p = self.pilot
        slots: list[int] = []
        for slot in range(self.pilot_draws):
            if len(slots) == len(p["regime"]):
                break
            w, _ = self._direction(net, sample_rng(self.pilot_seed, slot, 0))
            if np.array_equal(w, p["weights"][len(slots)]):  # kept draws are in slot order
                slots.append(slot)
        if len(slots) != len(p["regime"]):
            raise RuntimeError("the pilot's draws do not follow from its slots")  # a bug, not a user error
        return {"fraction": [float(x) for x in self.fraction], "draws": int(self.pilot_draws), "slots": slots,
                "regimes": [str(r) for r in p["regime"].tolist()]}

    def with_pilot_record(self, net: Network, record: dict[str, Any]) -> "Spanning":
        """The design fitted as ``record`` (:meth:`pilot_record`) says: each kept pilot draw's
        directions and fraction drawn again from its slot, its regime taken from the record."""
        this = replace(self, fraction=(float(record["fraction"][0]), float(record["fraction"][1])),
                       pilot_draws=int(record["draws"]))
        rows = []
        for slot, regime in zip(record["slots"], record["regimes"]):
            rng = sample_rng(this.pilot_seed, int(slot), 0)
            w, pf = this._direction(net, rng)  # as plain() draws them
            rows.append((w, pf, float(rng.uniform(*this.fraction)), str(regime)))
        ws, pfs, fracs, regimes = (list(col) for col in zip(*rows))
        return replace(this, pilot=_pilot_arrays(np.array(ws), np.array(pfs), np.array(fracs), np.array(regimes)))

    def lightest_share(self, net: Network, tools) -> float:
        """The first of :data:`LIGHT_SHARES` (at least the nominal lower end of ``fraction``)
        at which the base pattern, scaled to that share of its extent, has a converged AC-OPF:
        the lower end of ``fraction`` for ``net``."""
        floor = self.fraction[0]
        base = np.where(net.pd_mw > 0, net.pd_mw, 0.0)
        w = _base_weights(net) if base.sum() <= 0 else np.where(base > 0, base, _base_weights(net) * 1e-3)
        pf = np.clip(np.cos(np.arctan2(np.abs(net.qd_mvar), np.maximum(np.abs(net.pd_mw), 1e-9))), *self.power_factor)
        for share in (x for x in LIGHT_SHARES + HEAVY_SHARES if x >= floor):
            loading = self._along(net, w, pf, share, tools, "fit")
            if not isinstance(loading, str) and tools.solve(loading.pd_mw, loading.qd_mvar).status == "converged":
                return float(share)
        raise InputError("the base load pattern is not feasible at any share of its extent "
                         f"({', '.join(map(str, LIGHT_SHARES + HEAVY_SHARES))}); cannot place the spanning design",
                         where=f"network {net.name!r}")

    def shares_tried(self) -> list[float]:
        """The shares :meth:`lightest_share` tried: LIGHT_SHARES, and HEAVY_SHARES up to the
        fitted lower end when none of LIGHT_SHARES was feasible."""
        low = self.fraction[0]
        return list(LIGHT_SHARES) + [x for x in HEAVY_SHARES if x <= low and low > LIGHT_SHARES[-1]]

    def _pilot(self, net: Network, tools, run=None, net_hash: str = "") -> dict:
        if run is None:
            rows = [pilot_row(self, net, tools, slot) for slot in range(self.pilot_draws)]
        else:
            by_slot = {task[3]: row for task, row in run(pilot_draw, [(net, net_hash, self, slot)
                                                                    for slot in range(self.pilot_draws)])}
            rows = [by_slot[slot] for slot in range(self.pilot_draws)]
        kept = [row for row in rows if row is not None]
        if not kept:
            raise InputError(f"none of the {self.pilot_draws} pilot draws of the spanning design had a feasible "
                             "AC optimal power flow", where=f"network {net.name!r}")
        ws, pfs, fracs, regimes = (list(col) for col in zip(*kept))
        return _pilot_arrays(np.array(ws), np.array(pfs), np.array(fracs), np.array(regimes))

    def pilot_summary(self) -> dict[str, Any]:
        p = self.pilot or {}
        if not p:
            return {}
        return {"pilot_accepted": int(p["fraction"].size), "pilot_regimes": int(np.unique(p["regime"]).size),
                "pilot_hash": hash_arrays({k: p[k] for k in ("weights", "power_factor", "fraction", "regime")})}

    def steered(self, net: Network, rng, solver, probability=None, kind: str = "steered") -> Loading | str:
        p = self.pilot
        prob = p["probability"] if probability is None else probability
        j = int(rng.choice(prob.size, p=prob))
        w = p["weights"][j] * np.exp(self.step_sigma * rng.standard_normal(net.n_load))
        pf = np.clip(p["power_factor"][j] + self.pf_step * rng.standard_normal(net.n_load), *self.power_factor)
        frac = float(np.clip(p["fraction"][j] + self.fraction_step * rng.standard_normal(), *self.fraction))
        return self._along(net, w, pf, frac, solver, kind)

    def parameters(self, net: Network) -> dict[str, Any]:
        return {"concentration": list(self.concentration), "power_factor": list(self.power_factor),
                "fraction": list(self.fraction), "steer_share": self.steer_share,
                "steered_slots": "odd", "pilot_draws": self.pilot_draws, "pilot_seed": self.pilot_seed,
                "step_sigma": self.step_sigma, "pf_step": self.pf_step, "fraction_step": self.fraction_step,
                "start_share": self.start_share, "light_shares_tried": self.shares_tried(), **self.pilot_summary()}

    def draw(self, net: Network, rng, solver=None, slot: int = 0) -> Loading | str:
        if self.steer_share > 0 and slot % 2 == 1 and self.pilot is not None:
            return self.steered(net, rng, solver)
        return self.plain(net, rng, solver)[0]


_OUTSIDE_KINDS = ("power-factor", "concentrated", "unseen-regime")
# On networks of more than LARGE_NETWORK_BUSES buses the middle kind is "hotspot": there a
# concentrated direction has no feasible loading at any scale (the summed minimum outputs alone,
# 31 % of the base load on pegase1354, cannot be carried by a few buses: 10 of 10 draws
# loadability-infeasible), while a hotspot on top of the base pattern is (8 of 12 converged).
_LARGE_OUTSIDE_KINDS = ("power-factor", "hotspot", "unseen-regime")


@dataclass(frozen=True, eq=False)
class Outside:
    """Loadings the spanning design does not produce, one kind per sample slot in turn:

    - ``power-factor``: a spanning direction with every load's power factor drawn outside the
      training range: lagging in ``low_power_factor`` or leading in ``leading_power_factor``;
    - ``concentrated``: a direction whose load factors have a Gamma shape k below the training
      range (``concentrated``): load gathered on a few buses far more than training ever draws,
      at a share of the extent in the training range. (Loadings lighter than the training range
      are no test: the spanning design already reaches 5 % of each direction's extent, and
      lighter loadings are infeasible on networks with minimum outputs or heavy line charging.)
    - ``unseen-regime``: a steered draw kept only when its binding-limit regime never occurs in
      the training split (``train_regimes``), the pilot weighted toward regimes absent from it.

    On networks of more than ``LARGE_NETWORK_BUSES`` buses, ``hotspot`` replaces
    ``concentrated``: every load keeps ``1 - a`` of its base pattern and a share ``a`` (uniform
    in ``hotspot_share``) of the direction is spread by Gamma factors of shape k in
    ``concentrated``, so a few buses carry spikes on top of an even floor, at a share of the
    extent in the training range. Training's independent Gamma factors give either an even
    pattern without spikes (large k) or spikes with most loads near zero (small k), never both.
    """

    uses_slot: ClassVar[bool] = True
    solves_pilot: ClassVar[bool] = True
    name: str = "outside"
    spanning: Spanning = field(default_factory=Spanning)
    low_power_factor: tuple[float, float] = (0.6, 0.8)
    leading_power_factor: tuple[float, float] = (0.9, 0.99)
    concentrated: tuple[float, float] = (0.1, 0.3)
    hotspot_share: tuple[float, float] = (0.15, 0.3)
    train_regimes: frozenset = frozenset()
    train_split_hash: str = ""

    def fitted(self, net: Network, solver=None, run=None, store: Path | None = None,
               pilot: dict | None = None) -> "Outside":
        return replace(self, spanning=self.spanning.fitted(net, solver, run, store, pilot))

    def with_train(self, regimes, split_hash: str) -> "Outside":
        return replace(self, train_regimes=frozenset(str(r) for r in regimes), train_split_hash=split_hash)

    @staticmethod
    def kinds(net: Network) -> tuple[str, ...]:
        return _LARGE_OUTSIDE_KINDS if net.n_bus > LARGE_NETWORK_BUSES else _OUTSIDE_KINDS

    def parameters(self, net: Network) -> dict[str, Any]:
        large = net.n_bus > LARGE_NETWORK_BUSES
        return {"kinds": list(self.kinds(net)), "kind_of_slot": "slot % 3 in kinds order",
                "low_power_factor": list(self.low_power_factor),
                "leading_power_factor": list(self.leading_power_factor), "concentrated": list(self.concentrated),
                **({"hotspot_share": list(self.hotspot_share),
                    "hotspot": "weights (1 - a) x base + a x (base x Gamma(k, 1/k) factors, rescaled to the base "
                               "total), a uniform in hotspot_share, k log-uniform in concentrated"} if large else {}),
                "train_split_hash": self.train_split_hash, "train_regimes": len(self.train_regimes),
                "spanning": self.spanning.parameters(net)}

    def draw(self, net: Network, rng, solver=None, slot: int = 0) -> Loading | str:
        kind = self.kinds(net)[slot % 3]
        s = self.spanning
        if kind == "unseen-regime":
            if not self.train_regimes:
                raise InputError("the out-of-distribution design needs the training split's regimes: build "
                                 "train first, beside this split (or pass train=)", where="split test-ood")
            unseen = ~np.isin(s.pilot["regime"], list(self.train_regimes))
            prob = s.pilot["probability"] * np.where(unseen, 20.0, 1.0)
            return s.steered(net, rng, solver, prob / prob.sum(), kind="unseen-regime")
        if kind == "hotspot":
            k = _loguniform(rng, self.concentrated)
            g = rng.gamma(k, 1.0 / k, net.n_load)
            a = float(rng.uniform(*self.hotspot_share))
            b = _base_weights(net)
            hot = b * g * (float(b.sum()) / max(float(np.sum(b * g)), 1e-300))  # same total as b
            w = (1.0 - a) * b + a * hot  # a share a of the direction's total sits on the spikes
            pf = rng.uniform(s.power_factor[0], s.power_factor[1], net.n_load)
            return s._along(net, w, pf, float(rng.uniform(*s.fraction)), solver, kind)
        if kind == "concentrated":
            k = _loguniform(rng, self.concentrated)
            w = _base_weights(net) * rng.gamma(k, 1.0 / k, net.n_load)
            pf = rng.uniform(s.power_factor[0], s.power_factor[1], net.n_load)
            return s._along(net, w, pf, float(rng.uniform(*s.fraction)), solver, kind)
        # power-factor: a spanning direction (its drawn power factors replaced, the draws kept in
        # this order so that the frozen splits rebuild)
        w, _ = s._direction(net, rng)
        lead = rng.random(net.n_load) < 0.5
        pf = np.where(lead, rng.uniform(*self.leading_power_factor, net.n_load),
                      rng.uniform(*self.low_power_factor, net.n_load))
        return s._along(net, w, pf, float(rng.uniform(*s.fraction)), solver, kind, leading=lead)

    def check(self, loading: Loading, res) -> str | None:
        """Rejection reason after the reference is solved (None: keep)."""
        if loading.kind == "unseen-regime" and str(res.signature) in self.train_regimes:
            return "regime-seen-in-train"
        return None
