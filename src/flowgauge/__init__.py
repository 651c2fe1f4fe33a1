"""flowgauge: frozen test sets and a deterministic scorer for learned AC optimal power flow proxies.

The everyday calls are importable from here; each lives in its subpackage and is imported on
first use, so ``import flowgauge`` stays light.
"""

from __future__ import annotations

import importlib

from ._numerics import pin_cpu_level

# before anything loads numpy: the AVX2 level of arithmetic on every x86-64 CPU (_numerics)
pin_cpu_level()

__version__ = "0.1.0"

# public name -> subpackage that defines it
_API = {
    "load_network": "flowgauge.network",
    "Network": "flowgauge.network",
    "load_split": "flowgauge.splits",
    "write_predictions": "flowgauge.submission",
    "score": "flowgauge.scoring",
}

__all__ = ["__version__", *_API]


def __getattr__(name: str):
    if name in _API:
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'flowgauge' has no attribute {name!r}")


def __dir__() -> list[str]:
    # tab completion (notebooks, IPython) lists the lazily imported calls too
    return sorted({*globals(), *_API})
