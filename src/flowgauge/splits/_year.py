"""The year design: real hourly load patterns. Each sample is one hour of a year of recorded
area loads (the bundled area-load files, network/data/scenarios/<network>.json).

Spreading an hour over the loads: every load of an area is scaled by the same factor, the
area's total for the hour over the area's base total (sum of the base real loads of its
buses); reactive power is scaled by the same factor, so each load keeps its power factor.

Which hours: the year is cut into its ``D`` days, put in the order in which the golden-ratio
sequence ``x_k = frac(k (sqrt(5) - 1) / 2)``, k = 0, 1, 2, ..., first reaches them (day
``floor(x_k D)``; :func:`day_order`). Sample ``i`` takes day ``order[i mod D]``, so the first
``n`` samples fall on ``min(n, D)`` distinct days spread over the whole year whatever ``n`` is
(the builder does not tell a design how many samples it will draw; measured: no gap between
the chosen days longer than 1.99 D / n days, for every n, in years of 365 and 366 days). The
hour of the day is drawn uniformly from the sample's random stream (seeded); a redraw after a
rejected draw takes another hour of the same day.

Hours the network cannot serve as committed are left out: an hour whose total load is below the
summed minimum outputs of the generators (every in-service generator runs at least at its
minimum; losses only add load) is never drawn, and a day without a servable hour is skipped in
the day order. Their counts are recorded in the design's parameters. Each sample's ``kind`` is
its month, ``month-01`` .. ``month-12``; the hour itself is recovered from its loads by
:func:`hours_of_loadings`.

Capacitor switching: on a network whose fixed capacitors (buses with ``bs_mvar > 0``) add up
to more than the generators can absorb (the sum of their negative ``qmin_mvar``), the
capacitors are sized for the peak and nothing can absorb their output in light hours. There
each sample carries bus shunt flags (``shunt_in_service``): in every area, its capacitor banks
are connected largest first (ties: bus order) as long as the connected total stays within the
area's share of the hour (its total over its base total, at most 1) times the area's
capacitors; the rest are switched out. Reactors (``bs_mvar < 0``) and banks at buses of an
area the table does not list stay connected. :func:`capacitor_flags`. On such a network an
hour must also exceed the summed minimum outputs by :data:`SWITCHED_LOAD_MARGIN` to be drawn:
near that line every unit runs close to its minimum and most hours have no feasible AC-OPF
(measured on ``activsg2000``, docs/splits.md "Year design"). And since whole days there can
have no feasible hour as the units are committed, a sample whose first
:data:`DAY_ATTEMPTS` draws on its day are rejected takes its further draws from every servable
hour of the year.
"""

from __future__ import annotations

import calendar
import math
from dataclasses import dataclass, field, replace
from functools import lru_cache
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any, ClassVar

import numpy as np

from .._io import canonical_json, parse_json, read_input_bytes, sha256_hex
from ..errors import InputError
from ..network import Network
from ..network._changes import AREA_COLUMNS, check_areas
from ._designs import Loading

__all__ = ["Year", "AreaScenario", "load_scenario", "scenario_path", "SCENARIO_DIR", "day_order",
           "spread_area_loads", "area_base_mw", "hours_of_loadings", "capacitor_flags",
           "needs_capacitor_switching"]

# Hours within this share above the summed minimum outputs are left out where capacitors are
# switched: on activsg2000, 12 of 14 random servable hours below the line had no feasible AC-OPF
# with the banks switched, 2 of 26 above it (docs/splits.md, "Year design").
SWITCHED_LOAD_MARGIN = 0.10
# Where capacitors are switched, draws of a sample after this many rejected ones on its day take
# any servable hour of the year (a build stopped at a May day of 2016 whose 25 hours drawn were
# all infeasible).
DAY_ATTEMPTS = 10
SWITCHING_RULE = ("in each area, capacitor banks (bs_mvar > 0) connected largest first (ties: bus order) while the "
                  "connected total stays within min(1, the area's total for the hour / its base total) times the "
                  "area's capacitors; the rest switched out; reactors and banks outside the table's areas stay "
                  "connected")

SCENARIO_DIR = Path(__file__).resolve().parent.parent / "network" / "data" / "scenarios"
FORMAT_NAME = "flowgauge-area-loads"
GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0


@dataclass(frozen=True, eq=False)
class AreaScenario:
    """A year of hourly area loads: ``load_mw`` (H, A) [MW] for ``areas`` (A,) numbers of the
    bus column ``area_column``; ``hash`` the SHA-256 of the canonical document."""

    network: str
    year: int
    area_column: str
    areas: np.ndarray
    load_mw: np.ndarray
    source: dict
    hash: str
    file: str

    @property
    def hours(self) -> int:
        return int(self.load_mw.shape[0])

    def timestamp(self, hour: int) -> str:
        """Start of hour ``hour`` (0-based) as ``YYYY-MM-DDTHH:00``."""
        return (datetime(self.year, 1, 1) + timedelta(hours=int(hour))).strftime("%Y-%m-%dT%H:00")


def scenario_path(name: str) -> Path:
    return SCENARIO_DIR / f"{name}.json"


def bundled_scenarios() -> list[str]:
    return sorted(p.stem for p in SCENARIO_DIR.glob("*.json"))


def load_scenario(path: str | Path) -> AreaScenario:
    """Read an area-load file (docs/network-format.md, "Hourly area loads"); bad content raises
    :class:`InputError` naming the file and field."""
    where = str(path)
    doc = parse_json(read_input_bytes(path).decode("utf-8"), where=where)
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME or doc.get("format_version") != 1:
        raise InputError(f"expected an area-load file (format {FORMAT_NAME!r}, format_version 1)", where=where)
    year, column = doc.get("year"), doc.get("area_column")
    if not isinstance(year, int) or not 1900 <= year <= 2200:
        raise InputError("expected a year (whole number)", where=f"{where}: year")
    if column not in AREA_COLUMNS:
        raise InputError(f"expected one of {', '.join(AREA_COLUMNS)}", where=f"{where}: area_column")
    areas = doc.get("areas")
    if not (isinstance(areas, list) and areas and all(isinstance(a, int) and not isinstance(a, bool) for a in areas)
            and areas == sorted(set(areas))):
        raise InputError("expected a non-empty list of distinct area numbers in increasing order", where=f"{where}: areas")
    hours = 24 * (366 if calendar.isleap(year) else 365)
    try:
        load = np.array(doc.get("area_load_mw"), dtype=float)
    except (TypeError, ValueError):
        load = np.zeros(0)
    if load.shape != (hours, len(areas)) or not np.all(np.isfinite(load)) or np.any(load < 0):
        raise InputError(f"expected {hours} rows (the hours of {year}) of {len(areas)} finite loads >= 0 [MW]",
                         where=f"{where}: area_load_mw")
    return AreaScenario(network=str(doc.get("network")), year=year, area_column=column,
                        areas=np.array(areas, np.int64), load_mw=load, source=dict(doc.get("source") or {}),
                        hash=sha256_hex(canonical_json(doc)), file=Path(path).name)


@lru_cache(maxsize=8)
def _day_order(days: int) -> tuple[int, ...]:
    seen: set[int] = set()
    order: list[int] = []
    k = 0
    while len(order) < days:
        d = int(math.floor(((k * GOLDEN) % 1.0) * days))
        k += 1
        if d not in seen:
            seen.add(d)
            order.append(d)
    return tuple(order)


def day_order(days: int) -> np.ndarray:
    """The days 0 .. ``days - 1`` in the order the golden-ratio sequence ``frac(k (sqrt(5) -
    1) / 2)`` first reaches them (day ``floor(x days)``), shape (days,)."""
    return np.array(_day_order(int(days)), dtype=np.int64)


def area_base_mw(pd0_mw: np.ndarray, load_area: np.ndarray, areas: np.ndarray) -> np.ndarray:
    """Each area's base total (A,) [MW]: the sum of the base real loads ``pd0_mw`` (n_load,) of
    the loads in it (``load_area`` (n_load,) their area numbers, ``areas`` (A,) sorted)."""
    return np.bincount(np.searchsorted(areas, load_area), weights=pd0_mw, minlength=areas.size)


def spread_area_loads(pd0_mw: np.ndarray, qd0_mvar: np.ndarray, load_area: np.ndarray, areas: np.ndarray,
                      area_total_mw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Loads for given area totals: each load of area ``areas[j]`` scaled by
    ``area_total_mw[..., j] / (sum of the base real loads of area j)``, real and reactive alike.

    ``pd0_mw``, ``qd0_mvar``, ``load_area`` shape (n_load,); ``area_total_mw`` shape (A,) or
    (S, A) [MW]. Returns ``pd_mw``, ``qd_mvar`` of shape (n_load,) or (S, n_load)."""
    idx = np.searchsorted(areas, load_area)
    factor = np.asarray(area_total_mw, float) / area_base_mw(pd0_mw, load_area, areas)
    f = factor[..., idx]
    return pd0_mw * f, qd0_mvar * f


def hours_of_loadings(scenario: AreaScenario, net: Network, pd_mw: np.ndarray, rtol: float = 1e-6) -> np.ndarray:
    """The hour (0-based) of each loading of the year design, (S,) int: the hour whose area totals
    equal the loading's (relative tolerance ``rtol``); -1 where none does."""
    load_area = check_areas(scenario.areas, net, scenario.area_column, lambda a: f"network {net.name!r}")
    idx = np.searchsorted(scenario.areas, load_area)
    pd = np.atleast_2d(np.asarray(pd_mw, float))
    totals = np.stack([np.bincount(idx, weights=row, minlength=scenario.areas.size) for row in pd])
    out = np.full(pd.shape[0], -1, np.int64)
    for s, t in enumerate(totals):
        close = np.all(np.abs(scenario.load_mw - t) <= rtol * np.maximum(np.abs(t), 1.0), axis=1)
        hit = np.flatnonzero(close)
        if hit.size:
            out[s] = int(hit[0])
    return out


def needs_capacitor_switching(net: Network) -> bool:
    """Whether the network's fixed capacitors add up to more than its generators can absorb
    (sum of ``bs_mvar > 0`` against the sum of negative ``qmin_mvar``): then light hours need
    banks switched out (module docstring)."""
    bs = np.asarray(net.bs_mvar, float)
    qmin = np.asarray(net.qmin_mvar, float)
    return float(bs[bs > 0].sum()) > float(-qmin[qmin < 0].sum())


def capacitor_flags(net: Network, bus_area: np.ndarray, areas: np.ndarray, share: np.ndarray) -> np.ndarray:
    """Bus shunt flags (n_bus,) bool for one hour: ``bus_area`` (n_bus,) each bus's area number,
    ``areas`` (A,) the table's areas, ``share`` (A,) each area's total for the hour over its base
    total. In each area the capacitor banks are connected largest first (ties: bus order) while
    the connected total stays within ``min(1, share)`` times the area's capacitors."""
    bs = np.asarray(net.bs_mvar, float)
    on = np.ones(net.n_bus, bool)
    cap = bs > 0
    for j, a in enumerate(np.asarray(areas).tolist()):
        idx = np.flatnonzero(cap & (bus_area == a))
        if idx.size == 0:
            continue
        idx = idx[np.lexsort((idx, -bs[idx]))]  # largest first, ties by bus position
        target = min(max(float(share[j]), 0.0), 1.0) * float(bs[idx].sum())
        on[idx] = np.cumsum(bs[idx]) <= target * (1.0 + 1e-12)
    return on


@dataclass(frozen=True, eq=False)
class Year:
    """One sample per hour of a recorded year (module docstring); :meth:`fitted` reads the
    network's bundled area-load file and marks the hours the network can serve."""

    uses_slot: ClassVar[bool] = True
    uses_attempt: ClassVar[bool] = True
    name: str = "year"
    scenario: AreaScenario | None = field(default=None, repr=False)
    load_area: np.ndarray | None = field(default=None, repr=False)
    servable: np.ndarray | None = field(default=None, repr=False)  # (H,) bool
    minimum_total_mw: float = float("nan")
    bus_area: np.ndarray | None = field(default=None, repr=False)  # (n_bus,): set when capacitors are switched

    @property
    def has_states(self) -> bool:
        """Samples carry a state (all branches and generators in, bus shunt flags) when the
        design switches capacitors on this network."""
        return self.bus_area is not None

    @property
    def has_shunt_states(self) -> bool:
        return self.bus_area is not None

    def fitted(self, net: Network, solver=None) -> "Year":
        if self.scenario is not None:
            return self
        path = scenario_path(net.name)
        if not path.is_file():
            have = ", ".join(bundled_scenarios()) or "none"
            raise InputError(f"the year design needs hourly area loads, and network {net.name!r} has none "
                             f"(bundled for: {have})", where=f"network {net.name!r}")
        sc = load_scenario(path)
        load_area = check_areas(sc.areas, net, sc.area_column, lambda a: f"{path.name}: areas")
        # An hour whose total load is below the summed minimum outputs of the generators cannot
        # be served by the network as committed (losses only add load): it is left out.
        minimum = float(np.sum(net.pmin_mw))
        bus_area = None
        margin = 0.0
        if needs_capacitor_switching(net):
            bus_area = np.asarray(net.provenance[AREA_COLUMNS[sc.area_column]], np.int64)  # checked by check_areas
            margin = SWITCHED_LOAD_MARGIN
        servable = sc.load_mw.sum(axis=1) >= (1.0 + margin) * minimum
        if not servable.any():
            raise InputError(f"no hour of {path.name} reaches {1.0 + margin:g} x the summed minimum outputs of the "
                             f"generators ({minimum:.1f} MW)", where=f"network {net.name!r}")
        return replace(self, scenario=sc, load_area=load_area, servable=servable, minimum_total_mw=minimum,
                       bus_area=bus_area)

    def _need(self) -> AreaScenario:
        if self.scenario is None:
            raise InputError("the year design is not fitted to a network", where="design")
        return self.scenario

    def days_used(self) -> np.ndarray:
        """The days in the design's order with at least one servable hour, shape (<= D,)."""
        days = self._need().hours // 24
        keep = self.servable.reshape(days, 24).any(axis=1)
        order = day_order(days)
        return order[keep[order]]

    def day_of(self, slot: int) -> int:
        used = self.days_used()
        return int(used[slot % used.size])

    def parameters(self, net: Network) -> dict[str, Any]:
        sc = self._need()
        base = area_base_mw(net.pd_mw, self.load_area, sc.areas)
        days = sc.hours // 24
        return {
            "scenarios": sc.file, "scenarios_hash": sc.hash,
            "source": {k: sc.source.get(k) for k in ("file", "package", "package_version", "sha256")},
            "year": sc.year, "hours": sc.hours, "area_column": sc.area_column, "areas": sc.areas.tolist(),
            "base_area_load_mw": base.tolist(),
            "spreading": "each load of an area scaled by the area's total for the hour / the area's base total; "
                         "reactive power scaled by the same factor (power factor kept)",
            "hours_rule": "sample i: day used[i mod len(used)], the days in the order the golden-ratio sequence "
                          "frac(k (sqrt(5) - 1) / 2) first reaches them (day floor(x days)), keeping the days with a "
                          "servable hour; hour uniform among the day's servable hours from the sample's stream; "
                          "a redraw stays in the day",
            "servable": "total load of the hour >= summed minimum outputs of the generators",
            "minimum_total_load_mw": self.minimum_total_mw,
            "hours_left_out": int((~self.servable).sum()), "days_left_out": int(days - self.days_used().size),
            "days": days, "first_days": self.days_used()[:8].tolist(),
            "kind": "month of the hour, month-01 .. month-12",
            **({} if self.bus_area is None else self._switching_parameters(net)),
        }

    def _switching_parameters(self, net: Network) -> dict[str, Any]:
        bs, qmin = np.asarray(net.bs_mvar, float), np.asarray(net.qmin_mvar, float)
        return {"capacitor_switching": SWITCHING_RULE,
                "capacitor_switching_why": "the fixed capacitors exceed what the generators can absorb",
                "capacitors_mvar": float(bs[bs > 0].sum()), "capacitor_banks": int((bs > 0).sum()),
                "generators_absorb_mvar": float(-qmin[qmin < 0].sum()),
                "servable": f"total load of the hour >= {1.0 + SWITCHED_LOAD_MARGIN:g} x summed minimum outputs of "
                            "the generators (near the minimum, units have no room: measured mostly infeasible)",
                "minimum_load_margin": SWITCHED_LOAD_MARGIN,
                "hours_fallback": f"after {DAY_ATTEMPTS} rejected draws on its day, a sample's further draws take an "
                                  "hour uniform among every servable hour of the year (from its stream)",
                "day_attempts": DAY_ATTEMPTS}

    def draw(self, net: Network, rng: np.random.Generator, solver=None, *, slot: int = 0, attempt: int = 0) -> Loading:
        sc = self._need()
        if self.bus_area is not None and attempt >= DAY_ATTEMPTS:  # the day has had its chances
            hours = np.flatnonzero(self.servable)
        else:
            day = self.day_of(slot)
            hours = 24 * day + np.flatnonzero(self.servable[24 * day:24 * day + 24])
        hour = int(hours[int(rng.integers(hours.size))])
        pd, qd = spread_area_loads(net.pd_mw, net.qd_mvar, self.load_area, sc.areas, sc.load_mw[hour])
        month = (datetime(sc.year, 1, 1) + timedelta(hours=hour)).month
        shunt = None
        if self.bus_area is not None:
            share = sc.load_mw[hour] / area_base_mw(net.pd_mw, self.load_area, sc.areas)
            shunt = capacitor_flags(net, self.bus_area, sc.areas, share)
        return Loading(pd, qd, kind=f"month-{month:02d}", shunt_in_service=shunt)
