"""Statistical ties: a paired bootstrap interval for the difference between two entries, and
standard competition ranking ("1, 2, 2, 4")."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["split_mean", "paired_bootstrap_interval", "competition_ranks"]

_CHUNK = 256  # resamples drawn at once, to bound memory at _CHUNK x n_samples indices


def split_mean(values: np.ndarray, *, skip_null: bool) -> np.ndarray:
    """Mean over the last axis; with ``skip_null`` NaN entries are left out.

    ``values`` shape (..., n_samples); returns shape (...). All-NaN rows give NaN.
    """
    if not skip_null:
        return values.mean(axis=-1)
    valid = ~np.isnan(values)
    count = valid.sum(axis=-1)
    total = np.where(valid, values, 0.0).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def paired_bootstrap_interval(
    a: Sequence[np.ndarray], b: Sequence[np.ndarray], *, skip_null: bool,
    resamples: int, seed: int, level: float,
) -> tuple[float, float]:
    """Percentile interval for ``metric(a) - metric(b)``, resampling samples with replacement.

    ``a[s]`` and ``b[s]`` are the per-sample values of two entries on split ``s``, shape
    (n_samples_s,), aligned by sample id (paired: one draw of sample ids serves both). The
    metric is the mean over splits of the per-split mean; each split is resampled within
    itself. The generator is ``Generator(PCG64(seed))``, drawing split by split in the given
    order, so the interval depends only on the inputs.
    """
    rng = np.random.Generator(np.random.PCG64(seed))
    diffs = np.zeros(resamples)
    for xa, xb in zip(a, b):
        xa = np.asarray(xa, dtype=float)
        xb = np.asarray(xb, dtype=float)
        n = xa.shape[0]
        for start in range(0, resamples, _CHUNK):
            stop = min(start + _CHUNK, resamples)
            idx = rng.integers(0, n, size=(stop - start, n))
            diffs[start:stop] += (split_mean(xa[idx], skip_null=skip_null)
                                  - split_mean(xb[idx], skip_null=skip_null))
    diffs /= len(a)
    diffs = diffs[~np.isnan(diffs)]
    if diffs.size == 0:
        return (float("nan"), float("nan"))
    alpha = 1.0 - level
    lo, hi = np.quantile(diffs, [alpha / 2, 1.0 - alpha / 2])
    return (float(lo), float(hi))


def competition_ranks(tied_with_previous: Sequence[bool]) -> list[int]:
    """Standard competition ranks for entries in ranking order.

    ``tied_with_previous[i]`` says entry ``i`` cannot be told apart from entry ``i - 1``
    (ignored for ``i = 0``). A tied entry takes the rank of the one above it; the next
    untied entry takes its position: (F, T, F) gives 1, 1, 3 and (F, F, T, F) gives 1, 2, 2, 4.
    """
    ranks: list[int] = []
    for i, tied in enumerate(tied_with_previous):
        ranks.append(ranks[-1] if (i > 0 and tied) else i + 1)
    return ranks
