"""Running a baseline on a split and writing its predictions file."""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import InputError
from ._models import Prediction, dc_opf, linear, nearest

__all__ = ["BASELINES", "predict_baseline", "train_split_for", "write_baseline"]

# name -> (needs the train split, description for the predictions header)
BASELINES: dict[str, tuple[bool, str]] = {
    "dc-opf": (False, "DC optimal power flow dispatch of each sample's loads, with the network's "
                      "voltage setpoints (no learning)."),
    "nearest": (True, "Reference solution of the training sample with the nearest loads "
                      "(Euclidean distance in MW and MVAr)."),
    "linear": (True, "Ridge regression from standardised loads to pg_mw, vm_pu, va_deg and qg_mvar, "
                     "fitted on the train split (alpha 1.0); outputs projected onto their limits."),
}


def _check_name(name: str) -> None:
    if name not in BASELINES:
        raise InputError(f"The 'name' parameter must be one of {sorted(BASELINES)}. Got {name!r} instead.",
                         where="baseline name")


def _load(split):
    from ..splits import load_split
    return load_split(Path(split)) if isinstance(split, (str, os.PathLike)) else split


def train_split_for(split):
    """The ``train`` split of the same network: the sibling folder ``../train`` of the split's
    folder if it holds a split, else the frozen ``train`` split of the network."""
    from ..splits import load_split
    sibling = Path(split.path).parent / "train"
    if (sibling / "manifest.json").exists():
        train = load_split(sibling)
    else:
        train = load_split(split.network_name, "train")
    if train.network_name != split.network_name:
        raise InputError(f"the train split is of network {train.network_name!r}, not {split.network_name!r}",
                         where=str(train.path))
    if train.references is None:
        raise InputError("the train split has no reference solutions to learn from", where=str(train.path))
    return train


def predict_baseline(name: str, split, *, train=None, progress=None) -> Prediction:
    """Predictions of baseline ``name`` for every sample of ``split`` (a Split or its folder).
    ``train``: the training split (a Split or folder; found with :func:`train_split_for` when None).
    ``progress(done, total)``: called as samples are done (the dc-opf baseline solves one by one)."""
    _check_name(name)
    split = _load(split)
    if name == "dc-opf":
        # the one baseline that follows each sample's network state (nearest and linear ignore it)
        return dc_opf(split.network, split.pd_mw, split.sample_id, progress,
                      branch_in_service=getattr(split, "branch_in_service", None),
                      gen_in_service=getattr(split, "gen_in_service", None),
                      shunt_in_service=getattr(split, "shunt_in_service", None))
    train = train_split_for(split) if train is None else _load(train)
    if name == "nearest":
        return nearest(train, split.pd_mw, split.qd_mvar)
    return linear(train, split.pd_mw, split.qd_mvar)


def write_baseline(name: str, split, out: str | Path, *, train=None, format: str = "json",
                   progress=None) -> Path:
    """Write baseline ``name``'s predictions for ``split`` as a valid predictions file at ``out``."""
    from ..submission import write_predictions

    _check_name(name)
    split = _load(split)
    pred = predict_baseline(name, split, train=train, progress=progress)
    model = {"name": f"baseline {name}", "authors": ["flowgauge"], "description": BASELINES[name][1],
             "training_data_only": True}
    try:
        write_predictions(split, pg_mw=pred.pg_mw, vm_pu=pred.vm_pu, va_deg=pred.va_deg, qg_mvar=pred.qg_mvar,
                          model=model, path=out, format=format)
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror or exc}); choose a writable file path",
                         where=str(out)) from exc
    return Path(out)
