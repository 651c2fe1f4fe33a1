"""Baselines: reference proxies that every board starts with (``dc-opf``, ``nearest``,
``linear``), and the demo that runs and scores them."""

from ._models import RIDGE_ALPHA, Prediction, dc_opf, linear, nearest
from ._run import BASELINES, predict_baseline, train_split_for, write_baseline

__all__ = ["BASELINES", "Prediction", "RIDGE_ALPHA", "dc_opf", "linear", "nearest", "predict_baseline",
           "train_split_for", "write_baseline", "run_demo", "DemoResult"]


def __getattr__(name: str):
    if name in ("run_demo", "DemoResult"):
        from . import _demo
        return getattr(_demo, name)
    raise AttributeError(name)
