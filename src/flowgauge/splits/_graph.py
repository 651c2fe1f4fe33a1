"""Regions of a network found from its graph, for the regional-imbalance loadings."""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import shortest_path

from ..network import Network

__all__ = ["two_regions"]


def _hops(net: Network) -> np.ndarray:
    """Hop distances between all buses over in-service branches, shape (n_bus, n_bus)."""
    on = np.asarray(net.in_service, bool)
    f, t = net.f_idx[on], net.t_idx[on]
    adj = sp.coo_matrix((np.ones(f.size), (f, t)), shape=(net.n_bus, net.n_bus)).tocsr()
    return shortest_path(adj, method="D", directed=False, unweighted=True)


@lru_cache(maxsize=16)
def two_regions(net: Network) -> np.ndarray:
    """Split the buses into two regions around two far-apart buses.

    The first pole is the bus farthest (in hops) from the first bus, the second pole the bus
    farthest from the first pole (ties: the lowest position). Each bus joins the nearer pole
    (ties go to the first). Returns a bool mask, shape (n_bus,): True in the first region.
    """
    d = _hops(net)
    d[~np.isfinite(d)] = -1.0  # other islands never win the "farthest" choice
    a = int(np.argmax(d[0]))
    b = int(np.argmax(d[a]))
    da, db = d[a], d[b]
    da = np.where(da < 0, np.inf, da)
    db = np.where(db < 0, np.inf, db)
    mask = da <= db
    mask.setflags(write=False)
    return mask
