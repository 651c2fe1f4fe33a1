"""Aggregates over a split's samples and percentile-bootstrap confidence intervals."""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np
from numpy.random import PCG64, Generator

__all__ = ["summary_stats", "violation_stats", "bootstrap_ci"]

_BLOCK = 64  # resamples drawn at once (bounded memory for large splits)


def summary_stats(values: np.ndarray) -> dict[str, float] | None:
    """``mean``, ``median``, ``p95`` (linear interpolation) and ``max`` of the finite values of
    ``values`` (n_samples,); None when there is none."""
    v = np.asarray(values, float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return None
    return {"mean": float(v.mean()), "median": float(np.median(v)), "p95": float(np.percentile(v, 95)),
            "max": float(v.max())}


def violation_stats(magnitude: np.ndarray, violating: np.ndarray) -> dict[str, float] | None:
    """``share`` of the evaluated samples violating (beyond the tolerance), and the ``mean`` and
    ``max`` magnitude over the evaluated samples. NaN magnitudes are samples not evaluated
    (e.g. a diverged restoration); None when no sample was evaluated."""
    m = np.asarray(magnitude, float)
    seen = np.isfinite(m)
    if not seen.any():
        return None
    return {"share": float(np.mean(np.asarray(violating, bool)[seen])), "mean": float(m[seen].mean()),
            "max": float(m[seen].max())}


def bootstrap_ci(columns: Mapping[str, np.ndarray], *, resamples: int, seed: int, level: float) -> dict[str, Any]:
    """Percentile-bootstrap intervals of the mean of each column (n_samples,), NaN entries left
    out of each resample's mean. All columns share the same resampled rows, drawn from
    ``Generator(PCG64(seed))``. Returns {name: [lo, hi]}, or None for a column whose values
    are all NaN."""
    names = list(columns)
    data = np.stack([np.asarray(columns[k], float) for k in names]) if names else np.zeros((0, 0))
    n = data.shape[1] if names else 0
    if n == 0:
        return {k: None for k in names}
    finite = np.isfinite(data)
    vals = np.where(finite, data, 0.0)
    complete = finite.all(axis=1)
    rng = Generator(PCG64(seed))
    means = np.empty((len(names), resamples))
    for start in range(0, resamples, _BLOCK):
        b = min(_BLOCK, resamples - start)
        idx = rng.integers(0, n, size=(b, n))
        for i in range(len(names)):  # a handful of statistics, not an element loop
            sums = vals[i][idx].sum(axis=1)
            counts = np.full(b, n) if complete[i] else finite[i][idx].sum(axis=1)
            with np.errstate(invalid="ignore", divide="ignore"):
                means[i, start:start + b] = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
    alpha = (1.0 - level) / 2.0
    out: dict[str, Any] = {}
    for i, k in enumerate(names):
        row = means[i][np.isfinite(means[i])]
        if not finite[i].any() or row.size == 0:
            out[k] = None
        else:
            lo, hi = np.percentile(row, [100 * alpha, 100 * (1 - alpha)])
            out[k] = [float(lo), float(hi)]
    return out
