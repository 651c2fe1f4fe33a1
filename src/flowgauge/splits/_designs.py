"""Sampling designs: how each split draws its loadings. docs/splits.md gives the reasons.

A design draws one loading from a random generator. The edge-of-feasibility design also needs
the maximum loadability along its random direction, which it asks of the solver it is given.
A draw returns :class:`Loading` or a rejection reason (str); rejected draws are counted.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, replace
from typing import Any, Callable

import numpy as np

from ..errors import InputError
from ..network import Network
from ._graph import two_regions

__all__ = ["Loading", "LevelLocal", "Shifted", "Edge", "DESIGNS", "SPLIT_DESIGN", "design_for",
           "sample_rng", "draw_stream", "SEED_RULE"]


@dataclass(frozen=True)
class Loading:
    """One drawn loading: ``pd_mw``, ``qd_mvar`` shape (n_load,) [MW], [MVAr]; ``margin``
    (fraction of the maximum loadability left, NaN outside the edge design); the sample's state
    ``branch_in_service`` (n_branch,) and ``gen_in_service`` (n_gen,) bool, None for the
    network as it is (every design but the single-outage one), and ``shunt_in_service``
    (n_bus,) bool, None for the network's own bus shunts (every design but the year design with
    capacitor switching)."""

    pd_mw: np.ndarray
    qd_mvar: np.ndarray
    margin: float = float("nan")
    kind: str = ""  # which branch of a mixed design drew it (prefixes rejection reasons)
    branch_in_service: np.ndarray | None = None
    gen_in_service: np.ndarray | None = None
    shunt_in_service: np.ndarray | None = None


def sample_rng(seed: int, slot: int, attempt: int, stream: tuple[int, ...] = ()) -> np.random.Generator:
    """The generator of one draw: depends only on (seed, stream, sample slot, attempt), so
    chunking and worker count never change a split. ``stream`` (see :func:`draw_stream`) keeps
    splits of different names or designs apart even when they are given the same seed."""
    key = (*stream, slot, attempt)
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=key)))


# How draws are seeded, recorded in every manifest as ``seed_rule``. Manifests without it were
# built with "slot-attempt": (seed, slot, attempt) only, whatever the split's name.
SEED_RULE = "split-design-slot-attempt"


def draw_stream(split: str, design: str) -> tuple[int, int]:
    """Two 32-bit words from the SHA-256 of ``"<split>/<design>"``: the split's own stream of
    draws, so that ``train`` and ``test-id`` built with one seed share no draw."""
    import hashlib
    h = hashlib.sha256(f"{split}/{design}".encode("utf-8")).digest()
    return int.from_bytes(h[:4], "big"), int.from_bytes(h[4:8], "big")


def _uniform(rng: np.random.Generator, lo_hi: tuple[float, float], size=None):
    return rng.uniform(lo_hi[0], lo_hi[1], size=size)


# Level ranges are written for a network that can carry well over 115 % of its base load. Some
# published test systems cannot (their uniform loadability is 103-108 % of base): there the
# ranges are scaled down so that the top of the training range sits at HEADROOM x the network's
# uniform capacity, which keeps the training and out-of-distribution ranges apart as designed
# and leaves room above the training range for the heavy out-of-distribution levels.
LEVEL_TOP = 1.15
HEADROOM = 0.85
HIGH_CAP = 0.99  # heavy out-of-distribution levels stay below this share of the capacity


def level_scale(capacity: float) -> float:
    """Factor applied to every system-wide level range: 1.0 unless the network's uniform
    capacity (largest multiple of its base loading with a feasible AC-OPF) is below
    ``LEVEL_TOP / HEADROOM``."""
    if not np.isfinite(capacity):
        return 1.0
    return min(1.0, HEADROOM * capacity / LEVEL_TOP)


def _scaled(lo_hi: tuple[float, float], s: float) -> tuple[float, float]:
    return (lo_hi[0] * s, lo_hi[1] * s)


def uniform_capacity(net: Network) -> float:
    """The network's uniform capacity: 1 + the maximum loadability along its base loading,
    rounded down to 4 decimals so that the manifest records exactly the value the draws use."""
    from ..opf import max_loadability
    lr = max_loadability(net, net.pd_mw, net.qd_mvar, net.pd_mw, net.qd_mvar)
    if lr.status != "converged" or not np.isfinite(lr.lam) or lr.lam <= 0:
        raise InputError(f"the base loading has no feasible margin along its own direction "
                         f"(maximum loadability status {lr.status!r}); cannot place the level ranges",
                         where=f"network {net.name!r}")
    return float(np.floor((1.0 + lr.lam) * 1e4) / 1e4)


@dataclass(frozen=True)
class LevelLocal:
    """Each load's power = base x system-wide level x local factor; power factor kept."""

    name: str = "level-local"
    level: tuple[float, float] = (0.85, LEVEL_TOP)
    local_factor: tuple[float, float] = (0.95, 1.05)
    capacity: float = float("nan")  # the network's uniform capacity (see level_scale)

    def fitted(self, net: Network) -> "LevelLocal":
        return replace(self, capacity=uniform_capacity(net))

    @property
    def level_used(self) -> tuple[float, float]:
        return _scaled(self.level, level_scale(self.capacity))

    def parameters(self, net: Network) -> dict[str, Any]:
        return {"level_nominal": list(self.level), "local_factor": list(self.local_factor),
                "uniform_capacity": self.capacity, "level_scale": level_scale(self.capacity),
                "level": list(self.level_used)}

    def draw(self, net: Network, rng: np.random.Generator, solver=None) -> Loading | str:
        scale = _uniform(rng, self.level_used) * _uniform(rng, self.local_factor, net.n_load)
        return Loading(net.pd_mw * scale, net.qd_mvar * scale)


_OOD_KINDS = ("level-low", "level-high", "regional", "power-factor")


@dataclass(frozen=True)
class Shifted:
    """Loadings the level-local design cannot produce. Each draw picks one kind, equally likely:

    - ``level-low`` / ``level-high``: system-wide level below / above the training range;
    - ``regional``: one graph region heavy, the other light (which one is random);
    - ``power-factor``: a training-range level, but every load's power-factor angle shifted by
      one system-wide angle of random sign.
    Local factors are narrower than in training, so that no draw of the level and local
    factor ranges of ``LevelLocal`` can produce a level or regional loading; all level ranges
    are scaled with the same ``level_scale`` as the training design.
    """

    name: str = "shifted"
    level_low: tuple[float, float] = (0.55, 0.78)
    level_high: tuple[float, float] = (1.25, 1.40)
    heavy: tuple[float, float] = (1.15, 1.35)
    light: tuple[float, float] = (0.60, 0.85)
    train_level: tuple[float, float] = (0.85, LEVEL_TOP)
    angle_shift_rad: tuple[float, float] = (0.10, 0.30)
    local_factor: tuple[float, float] = (0.97, 1.03)
    capacity: float = float("nan")  # the network's uniform capacity (see level_scale)

    def fitted(self, net: Network) -> "Shifted":
        return replace(self, capacity=uniform_capacity(net))

    def ranges(self) -> dict[str, tuple[float, float]]:
        """The level ranges the draws use: nominal ranges x level_scale, heavy levels capped."""
        s = level_scale(self.capacity)
        out = {k: _scaled(getattr(self, k), s) for k in ("level_low", "level_high", "heavy", "light", "train_level")}
        if np.isfinite(self.capacity):
            lo, hi = out["level_high"]
            out["level_high"] = (lo, min(hi, HIGH_CAP * self.capacity))
        return out

    def parameters(self, net: Network) -> dict[str, Any]:
        p = {f"{k}_nominal": list(v) for k, v in asdict(self).items() if isinstance(v, tuple)}
        p.update({k: list(v) for k, v in self.ranges().items()})
        p["angle_shift_rad"] = list(self.angle_shift_rad)
        p["local_factor"] = list(self.local_factor)
        p["uniform_capacity"] = self.capacity
        p["level_scale"] = level_scale(self.capacity)
        p["kinds"] = list(_OOD_KINDS)
        p["region_a_bus_id"] = net.bus_id[two_regions(net)].tolist()
        return p

    def draw(self, net: Network, rng: np.random.Generator, solver=None) -> Loading | str:
        kind = _OOD_KINDS[int(rng.integers(len(_OOD_KINDS)))]
        local = _uniform(rng, self.local_factor, net.n_load)
        pd0, qd0 = net.pd_mw, net.qd_mvar
        r = self.ranges()
        if kind in ("level-low", "level-high"):
            scale = _uniform(rng, r["level_low"] if kind == "level-low" else r["level_high"]) * local
            return Loading(pd0 * scale, qd0 * scale, kind=kind)
        if kind == "regional":
            in_a = two_regions(net)[net.load_bus_idx]
            heavy, light = _uniform(rng, r["heavy"]), _uniform(rng, r["light"])
            a_heavy = bool(rng.integers(2))
            scale = np.where(in_a == a_heavy, heavy, light) * local
            return Loading(pd0 * scale, qd0 * scale, kind=kind)
        level = _uniform(rng, r["train_level"])
        shift = _uniform(rng, self.angle_shift_rad) * (1.0 if rng.integers(2) else -1.0)
        pd = pd0 * level * local
        angle = np.clip(np.arctan2(qd0, np.where(pd0 == 0, 1.0, pd0)) + shift, -1.4, 1.4)
        qd = np.where(pd0 > 0, pd * np.tan(angle), qd0 * level * local)
        return Loading(pd, qd, kind=kind)


@dataclass(frozen=True)
class Edge:
    """Near the edge of feasibility: a random load-increase direction from the base loading, its
    maximum loadability lambda, and the loading at (1 - m) x lambda along it with m drawn in
    ``margin``. The direction weights each load's base power by a uniform draw (power factor
    kept), scaled to the base total load."""

    name: str = "edge"
    margin: tuple[float, float] = (0.002, 0.03)
    weight: tuple[float, float] = (0.0, 1.0)

    def fitted(self, net: Network) -> "Edge":
        return self

    def parameters(self, net: Network) -> dict[str, Any]:
        return {"margin": list(self.margin), "direction_weight": list(self.weight),
                "start": "base loading", "direction": "base load x uniform weight, scaled to the base total"}

    def draw(self, net: Network, rng: np.random.Generator, solver=None) -> Loading | str:
        w = _uniform(rng, self.weight, net.n_load)
        total = float(np.sum(net.pd_mw))
        d_pd = net.pd_mw * w
        s = float(np.sum(d_pd))
        d_pd = d_pd * (total / s) if s > 0 else d_pd
        with np.errstate(divide="ignore", invalid="ignore"):
            d_qd = np.where(net.pd_mw != 0, d_pd * net.qd_mvar / np.where(net.pd_mw == 0, 1.0, net.pd_mw), 0.0)
        m = _uniform(rng, self.margin)
        lam = solver.max_loadability(net.pd_mw, net.qd_mvar, d_pd, d_qd)
        if isinstance(lam, str):
            return lam
        return Loading(net.pd_mw + (1.0 - m) * lam * d_pd, net.qd_mvar + (1.0 - m) * lam * d_qd, float(m))


def _spanning():
    from ._spanning import Spanning
    return Spanning()


def _outside():
    from ._spanning import Outside
    return Outside()


def _year():
    from ._year import Year
    return Year()


def _single_outage():
    from ._outage import SingleOutage
    return SingleOutage()


DESIGNS: dict[str, Callable[[], Any]] = {"level-local": LevelLocal, "shifted": Shifted, "edge": Edge,
                                         "spanning": _spanning, "outside": _outside, "year": _year,
                                         "single-outage": _single_outage}
# train and test-id span the feasible region (different seeds, so no shared draw); test-ood lies
# outside what the training design produces; train-local is the narrow design around the base
# case, kept so that a user can measure the narrow-to-wide generalisation gap. test-n1 and
# train-n1: training-design loadings with one branch or generator out (their own streams).
SPLIT_DESIGN = {"train": "spanning", "test-id": "spanning", "test-ood": "outside", "test-edge": "edge",
                "test-year": "year", "train-local": "level-local", "test-n1": "single-outage",
                "train-n1": "single-outage"}


def design_for(split: str, net: Network | None = None, train=None, run=None, store=None, pilot=None):
    """The design of ``split``; with ``net``, fitted to that network (level ranges placed, the
    spanning design's pilot solved). ``train``: the training split (a loaded Split), which the
    out-of-distribution design needs for its unseen-regime draws. ``run`` and ``store``: where
    the spanning design's pilot draws run and where the fitted pilot is kept
    (:meth:`._spanning.Spanning.fitted`); the other designs solve nothing when fitted.
    ``pilot``: the spanning design's fitted pilot as a recipe keeps it
    (:meth:`._spanning.Spanning.pilot_record`): used instead of solving one."""
    if split not in SPLIT_DESIGN:
        raise InputError(f"expected one of {', '.join(SPLIT_DESIGN)}, got {split!r}", where="split")
    design = DESIGNS[SPLIT_DESIGN[split]]()
    if net is None:
        return design
    design = design.fitted(net, run=run, store=store, pilot=pilot) if getattr(design, "solves_pilot", False) \
        else design.fitted(net)
    if hasattr(design, "with_train") and train is not None and train.references is not None:
        design = design.with_train(train.references.signature, train.split_hash)
    return design
