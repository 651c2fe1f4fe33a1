"""Checks run on every network as it is loaded."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ._model import Network

__all__ = ["check_network"]


def check_network(net: Network, *, source: str = "<network>") -> None:
    """Raise :class:`InputError` naming the element and field of the first problem found."""
    # Fleshed out in the foundation issue: duplicate ids, missing buses, limits, islands.
    for name in Network.array_fields():
        a = getattr(net, name)
        if a.dtype.kind == "f" and name not in ("cost_c2", "cost_c1", "cost_c0", "rate_mva"):
            bad = np.flatnonzero(~np.isfinite(a))
            if bad.size:
                raise InputError(f"non-finite value {a[bad[0]]!r}", where=f"{source}: {name}[{bad[0]}]")
