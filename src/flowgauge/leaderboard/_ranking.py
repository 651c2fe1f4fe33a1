"""Rank the entries of one network over a set of splits, with statistical ties."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ._rules import METRICS, Rules
from ._ties import competition_ranks, paired_bootstrap_interval, split_mean

__all__ = ["Scored", "Standing", "RankTable", "rank_table", "metric_value", "per_sample_column"]


@dataclass(frozen=True)
class Scored:
    """One scorecard (as read from its file) and where it came from, for messages."""

    where: str
    card: dict


@dataclass(frozen=True)
class Standing:
    """One row of a ranking table.

    ``values`` follows the rule's keys: the mean over the table's splits of each key metric.
    ``diff_ci`` is the bootstrap interval of (this entry - the entry above) in the primary
    key, None for the first row; ``tied`` says that interval contains zero.
    """

    rank: int
    entry: str
    values: tuple[float, ...]
    diff_ci: tuple[float, float] | None
    tied: bool


@dataclass(frozen=True)
class RankTable:
    """The ranking of one network over ``splits``; ``scope`` is "all" or the split name."""

    network: str
    scope: str
    splits: tuple[str, ...]
    standings: tuple[Standing, ...]
    unranked: tuple[tuple[str, str], ...]  # (entry, reason)
    keys: tuple = ()  # the RankKeys this table is ordered by


def metric_value(card: dict, metric: str) -> float:
    """The scorer's per-split value of a key metric (NaN when the scorecard has null); for an
    ``absolute`` metric, the mean of the absolute per-sample values."""
    spec = METRICS[metric]
    if spec.aggregate is None:
        _, values = per_sample_column(Scored("scorecard", card), spec.per_sample)
        return float(split_mean(np.abs(values), skip_null=spec.skip_null))
    value = card["aggregates"]
    for part in spec.aggregate:
        value = value[part] if isinstance(value, dict) else None
    return float("nan") if value is None else float(value)


def per_sample_column(scored: Scored, column: str) -> tuple[np.ndarray, np.ndarray]:
    """(sample ids, values) of a per-sample column, sorted by sample id; null becomes NaN."""
    per_sample = scored.card.get("per_sample")
    if not isinstance(per_sample, dict) or column not in per_sample or "sample_id" not in per_sample:
        raise InputError(f"scorecard has no per_sample column {column!r}", where=scored.where)
    ids = np.asarray(per_sample["sample_id"])
    values = np.array([np.nan if v is None else v for v in per_sample[column]], dtype=float)
    if ids.shape != values.shape:
        raise InputError(f"per_sample columns sample_id and {column!r} differ in length",
                         where=scored.where)
    order = np.argsort(ids, kind="stable")
    return ids[order], values[order]


def _sort_key(values: tuple[float, ...], keys, name: str) -> tuple:
    parts = []
    for key, v in zip(keys, values):
        v = math.inf if math.isnan(v) else (v if key.direction == "lower" else -v)
        parts.append(v)
    return (*parts, name)


def rank_table(
    network: str, scope: str, splits: tuple[str, ...],
    entries: Mapping[str, Mapping[str, Scored]], rules: Rules, excluded: Mapping[str, str] | None = None,
) -> RankTable:
    """Rank ``entries`` (entry name -> split -> scorecard) of ``network`` over ``splits``.

    Entries are ordered by the rule's keys (each the mean over ``splits`` of the per-split
    value), then by name. Neighbours whose paired bootstrap interval for the difference in
    the primary key contains zero share a rank (standard competition ranking). The keys are
    ``rules.keys_for(scope)``; entries named in ``excluded`` (entry -> reason) are not ranked.
    """
    keys = rules.keys_for(scope)
    complete, unranked = {}, []
    for name in sorted(entries):
        missing = [s for s in splits if s not in entries[name]]
        if excluded and name in excluded:
            unranked.append((name, excluded[name]))
        elif missing:
            unranked.append((name, "no submission for " + ", ".join(missing)))
        else:
            complete[name] = [entries[name][s] for s in splits]
    values = {name: tuple(float(np.mean([metric_value(c.card, k.metric) for c in cards]))
                          for k in keys)
              for name, cards in complete.items()}
    order = sorted(complete, key=lambda n: _sort_key(values[n], keys, n))
    if not order:
        return RankTable(network, scope, splits, (), tuple(unranked), keys)
    primary = METRICS[keys[0].metric]
    columns = {n: _aligned(complete[n], primary.per_sample, complete[order[0]], primary.absolute)
               for n in order}
    cis: list[tuple[float, float] | None] = [None]
    for above, below in zip(order, order[1:]):
        cis.append(paired_bootstrap_interval(
            columns[below], columns[above], skip_null=primary.skip_null,
            resamples=rules.resamples, seed=rules.seed, level=rules.level))
    tied = [ci is not None and not (ci[0] > 0 or ci[1] < 0) for ci in cis]
    ranks = competition_ranks(tied)
    standings = tuple(Standing(r, n, values[n], ci, t)
                      for r, n, ci, t in zip(ranks, order, cis, tied))
    return RankTable(network, scope, splits, standings, tuple(unranked), keys)


def _aligned(cards: list[Scored], column: str, reference: list[Scored],
             absolute: bool) -> list[np.ndarray]:
    """Per-split value arrays, checked to cover the same sample ids as the reference entry."""
    out = []
    for scored, ref in zip(cards, reference):
        ids, vals = per_sample_column(scored, column)
        vals = np.abs(vals) if absolute else vals
        ref_ids, _ = per_sample_column(ref, column)
        if ids.shape != ref_ids.shape or not np.array_equal(ids, ref_ids):
            raise InputError(f"per_sample sample ids differ from those of {ref.where}; "
                             "scorecards of one split must cover the same samples",
                             where=scored.where)
        out.append(vals)
    return out
