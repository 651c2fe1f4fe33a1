"""Writes: a scorecard never replaces an input, default scorecard names keep the whole stem,
worker processes die with their parent, and published folders get normal permissions."""

from __future__ import annotations

import os
import signal
import stat
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import psutil
import pytest

from flowgauge._cli.score import default_scorecard_path
from flowgauge.cli import main
from flowgauge.splits import load_split
from flowgauge.submission import write_predictions

MODEL = {"name": "flat start", "authors": ["tests"], "description": "zero dispatch, 1 p.u. voltages",
         "training_data_only": True}


def _flat_predictions(network: str, split: str, path: Path) -> Path:
    s = load_split(network, split, references=False)
    write_predictions(s, pg_mw=np.zeros((s.n_samples, len(s.gen_id))), vm_pu=np.ones((s.n_samples, len(s.bus_id))),
                      path=path, model=MODEL)
    return path


@pytest.fixture(scope="module")
def predictions(tmp_path_factory) -> Path:
    return _flat_predictions("ieee14", "test-id", tmp_path_factory.mktemp("p") / "m.v1.json")


def test_score_refuses_to_write_its_scorecard_over_the_predictions(predictions, capsys):
    before = predictions.read_bytes()
    rc = main(["score", str(predictions), "--out", str(predictions)])
    err = capsys.readouterr().err
    assert rc == 2
    assert err == f"Error: --out {predictions}: is an input of this run ({predictions}); choose another path\n"
    assert predictions.read_bytes() == before


def test_score_refuses_the_same_path_for_scorecard_and_per_sample_table(predictions, tmp_path, capsys):
    out = tmp_path / "s.json"
    rc = main(["score", str(predictions), "--out", str(out), "--per-sample", str(out)])
    assert rc == 2
    assert capsys.readouterr().err == f"Error: --per-sample {out}: is also given to --out; choose two paths\n"
    assert not out.exists()


def test_default_scorecard_name_keeps_the_whole_stem():
    assert default_scorecard_path(Path("d/m.v1.json")) == Path("d/m.v1.scorecard.json")
    assert default_scorecard_path(Path("d/m.v2.parquet")) == Path("d/m.v2.scorecard.json")
    # a scorecard given as FILE is never its own default output
    assert default_scorecard_path(Path("x.scorecard.json")) == Path("x.scorecard.scorecard.json")


def test_score_writes_the_default_scorecard_beside_versioned_predictions(predictions, capsys):
    v2 = predictions.with_name("m.v2.json")
    v2.write_bytes(predictions.read_bytes())
    assert main(["score", str(predictions)]) == 0
    assert main(["score", str(v2)]) == 0
    out = capsys.readouterr().out
    assert (predictions.parent / "m.v1.scorecard.json").exists() and (predictions.parent / "m.v2.scorecard.json").exists()
    assert "scorecard " in out and "m.v2.scorecard.json" in out


def test_score_workers_die_with_their_parent(tmp_path):
    """``kill -9`` of ``score --workers 2`` leaves no worker behind (psutil lists them)."""
    path = _flat_predictions("ieee300", "test-id", tmp_path / "p300.json")
    proc = subprocess.Popen([sys.executable, "-c", "from flowgauge.cli import run; run()", "score", str(path),
                             "--workers", "2", "--out", str(tmp_path / "s.json")],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    parent = psutil.Process(proc.pid)
    workers: list = []
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and proc.poll() is None:
        workers = parent.children(recursive=True)
        if len(workers) >= 2:
            break
        time.sleep(0.05)
    assert len(workers) >= 2, "the scorer finished or failed before its workers started"
    time.sleep(0.3)  # let the workers run their initializer and take tasks
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    gone, alive = psutil.wait_procs(workers, timeout=10)
    for p in alive:  # leave no orphan behind, even when the check fails
        p.kill()
    assert alive == [], f"workers still running after their parent was killed: {[p.pid for p in alive]}"


def test_publish_creates_its_folder_with_the_umask_permissions(tmp_path, capsys):
    out = tmp_path / "published"
    assert main(["splits", "publish", "ieee14/test-id", "--out", str(out)]) == 0
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(out.stat().st_mode) == 0o777 & ~umask
    assert sorted(p.name for p in out.iterdir()) == ["inputs.parquet", "manifest.json"]


def test_dc_opf_baseline_reports_progress_per_sample():
    from flowgauge.baselines import predict_baseline
    split = load_split("ieee14", "test-id", references=False)
    calls: list = []
    predict_baseline("dc-opf", split, progress=lambda done, total: calls.append((done, total)))
    assert calls[0] == (1, split.n_samples) and calls[-1] == (split.n_samples, split.n_samples)
    assert len(calls) == split.n_samples
