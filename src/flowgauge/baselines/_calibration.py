"""Calibration predictions: a split's own reference solution with seeded noise of a known size,
so that a board shows what each verdict makes of a proxy whose error is known.

At level ``e``: ``pg_mw * (1 + e N(0, 1))`` (relative) and ``vm_pu + e N(0, 1)`` (absolute, p.u.);
the reference's ``va_deg`` and ``qg_mvar`` are left out (the scorer does not need them). The
noise comes from ``Generator(PCG64(seed))`` drawn in sample-id order, one (n_gen + n_bus) row
per sample, so the same split, level and seed always give the same predictions.
"""

from __future__ import annotations

import numpy as np
from numpy.random import PCG64, Generator

from ..errors import InputError

__all__ = ["CALIBRATION_LEVELS", "CALIBRATION_SEED", "calibration_predictions", "calibration_name"]

CALIBRATION_LEVELS = (1e-4, 1e-3, 1e-2)
CALIBRATION_SEED = 20261202


def calibration_name(level: float) -> str:
    """The entry name of a calibration row, e.g. ``reference + noise 1e-04``."""
    return f"reference + noise {level:.0e}"


def calibration_predictions(split, level: float, seed: int = CALIBRATION_SEED) -> tuple[np.ndarray, np.ndarray]:
    """``(pg_mw (S, n_gen) [MW], vm_pu (S, n_bus) [p.u.])`` in the split's sample order: its
    references with noise of size ``level`` (0 gives the references themselves)."""
    if split.references is None:
        raise InputError("calibration needs the split's reference solutions (a published split has none)",
                         where=str(split.path))
    if not (np.isfinite(level) and level >= 0):
        raise InputError(f"expected a noise level >= 0, got {level!r}", where="level")
    ref = split.references
    pg, vm = np.asarray(ref.pg_mw, float), np.asarray(ref.vm_pu, float)
    order = np.argsort(np.asarray(split.sample_id), kind="stable")
    noise = np.empty((pg.shape[0], pg.shape[1] + vm.shape[1]))
    noise[order] = Generator(PCG64(seed)).standard_normal(noise.shape)
    return pg * (1.0 + level * noise[:, :pg.shape[1]]), vm + level * noise[:, pg.shape[1]:]
