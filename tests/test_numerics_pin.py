"""One family of BLAS kernels on every x86-64 CPU (flowgauge._numerics): importing flowgauge
first pins OpenBLAS to its AVX2 kernels, so a committed scorecard rescored on a machine with
AVX-512 gives the same bytes as on the AVX2 machine that wrote it.

Each check runs in a fresh interpreter: OpenBLAS chooses its kernels once, when it loads."""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
from pathlib import Path

import pytest

from flowgauge._numerics import KERNELS, REPRODUCIBLE_KERNELS, VARIABLE, _cpu_flags

ROOT = Path(__file__).resolve().parents[1]
AVX2 = platform.machine().lower() in ("x86_64", "amd64") and {"avx2", "fma"} <= _cpu_flags()
needs_avx2 = pytest.mark.skipif(not AVX2, reason="the pin applies to x86-64 CPUs with AVX2 and FMA")

REPORT = ("import json, scipy.sparse.linalg; from flowgauge._numerics import blas_kernels, pinned, kernel_note; "
          "print(json.dumps({'pinned': pinned(), 'kernels': blas_kernels(), 'note': kernel_note()}))")


def _run(code: str, **env_changes) -> dict:
    env = {k: v for k, v in os.environ.items() if k != VARIABLE}
    env.update(env_changes)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


@needs_avx2
def test_importing_flowgauge_first_pins_the_avx2_kernels():
    got = _run("import flowgauge; " + REPORT)
    assert got["pinned"] == [True, f"{VARIABLE}={KERNELS} set by flowgauge"]
    assert got["kernels"], "no OpenBLAS library found in the process"
    assert set(got["kernels"].values()) <= set(REPRODUCIBLE_KERNELS)
    assert got["note"] == ""


def test_numpy_imported_first_is_reported_not_pinned():
    got = _run("import numpy, flowgauge; " + REPORT)
    assert got["pinned"] == [False, "numpy was imported before flowgauge"]


@needs_avx2
def test_a_variable_set_by_the_user_is_kept_and_named_in_the_note():
    # Sandybridge: OpenBLAS's AVX (no AVX2) kernels, which every AVX2 CPU also runs
    got = _run("import flowgauge; " + REPORT, **{VARIABLE: "Sandybridge"})
    assert got["pinned"] == [False, f"{VARIABLE}=Sandybridge was set by the environment"]
    assert set(got["kernels"].values()) == {"Sandybridge"}
    assert "Sandybridge kernels" in got["note"] and f"{VARIABLE}={KERNELS}" in got["note"]


@needs_avx2
def test_a_committed_scorecard_rescores_to_its_bytes(tmp_path):
    # Source: the committed board (leaderboard/scorecards), written on an AVX2 machine. On an
    # AVX-512 machine (Intel Sapphire Rapids) without the pin this rescoring gave another
    # scorecard hash (two per-sample gaps apart in the 10th digit; measured 2026-12-02).
    sub = ROOT / "leaderboard" / "submissions" / "activsg200" / "test-id" / "dc-opf.parquet"
    card = json.loads((ROOT / "leaderboard" / "scorecards" / "activsg200" / "test-id" / "dc-opf.json").read_text())
    out = tmp_path / "dc-opf.scorecard.json"
    env = {k: v for k, v in os.environ.items() if k != VARIABLE}
    done = subprocess.run([sys.executable, "-c", "import sys; from flowgauge.cli import main; sys.exit(main(sys.argv[1:]))",
                           "score", str(sub), "--out", str(out)], cwd=ROOT,
                          env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert json.loads(out.read_text())["scorecard_hash"] == card["scorecard_hash"]
