"""The AVX2 level of arithmetic on every x86-64 CPU (flowgauge._numerics): importing flowgauge
first holds OpenBLAS to its AVX2 kernels and numpy to its loops without AVX-512, so a committed
scorecard rescored on a machine with AVX-512 gives the same bytes as on the AVX2 machine that
wrote it.

Each check runs in a fresh interpreter: OpenBLAS chooses its kernels once, when it loads."""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
from pathlib import Path

import pytest

from flowgauge._numerics import (KERNELS, NUMPY_VARIABLE, OFF_VARIABLE, REPRODUCIBLE_KERNELS, VARIABLE,
                                 _cpu_flags, numpy_avx512_targets)

ROOT = Path(__file__).resolve().parents[1]
AVX2 = platform.machine().lower() in ("x86_64", "amd64") and {"avx2", "fma"} <= _cpu_flags()
AVX512 = AVX2 and "avx512f" in _cpu_flags()
needs_avx2 = pytest.mark.skipif(not AVX2, reason="the pin applies to x86-64 CPUs with AVX2 and FMA")

REPORT = ("import json, os, scipy.sparse.linalg; "
          "from flowgauge._numerics import blas_kernels, pinned, kernel_note, numpy_uses_avx512; "
          "print(json.dumps({'pinned': pinned(), 'kernels': blas_kernels(), 'note': kernel_note(), "
          "'numpy_avx512': numpy_uses_avx512(), 'npy': os.environ.get('NPY_DISABLE_CPU_FEATURES')}))")


def _env(**changes) -> dict:
    """This environment without any CPU-level setting of its own, plus ``changes``."""
    env = {k: v for k, v in os.environ.items() if k not in (VARIABLE, NUMPY_VARIABLE, OFF_VARIABLE)}
    env.update(changes)
    return env


def _run(code: str, **env_changes) -> dict:
    env = _env(**env_changes)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


@needs_avx2
def test_importing_flowgauge_first_pins_the_avx2_kernels():
    got = _run("import flowgauge; " + REPORT)
    assert got["pinned"][0] is True and got["pinned"][1].startswith(f"{VARIABLE}={KERNELS}")
    assert got["kernels"], "no OpenBLAS library found in the process"
    assert set(got["kernels"].values()) <= set(REPRODUCIBLE_KERNELS)
    assert got["numpy_avx512"] is False
    assert got["note"] == ""
    import numpy
    assert got["npy"] == (numpy_avx512_targets(numpy.__version__) if AVX512 else None)


@needs_avx2
def test_the_pin_can_be_turned_off():
    got = _run("import flowgauge; " + REPORT, **{OFF_VARIABLE: "0"})
    assert got["pinned"] == [False, f"{OFF_VARIABLE}=0 turned the pin off"]
    assert got["npy"] is None
    if AVX512:  # left to choose, both libraries take their AVX-512 code here, and the note says so
        assert got["numpy_avx512"] is True
        assert "numpy's AVX-512 loops" in got["note"] and f"{VARIABLE}={KERNELS}" in got["note"]


def test_numpys_avx512_targets_by_version():
    # read off numpy 2.0.2 and 2.4.6 (numpy._core._multiarray_umath.__cpu_dispatch__)
    assert numpy_avx512_targets("2.4.6") == "X86_V4 AVX512_ICL AVX512_SPR"
    assert numpy_avx512_targets("2.0.2").split() == ["AVX512F", "AVX512CD", "AVX512_KNL", "AVX512_KNM", "AVX512_SKX",
                                                     "AVX512_CLX", "AVX512_CNL", "AVX512_ICL"]
    # and against the numpy installed here: every name is one of its dispatch targets (numpy
    # warns about a name it does not know and leaves that target on)
    import numpy
    dispatch = set(numpy._core._multiarray_umath.__cpu_dispatch__)
    if any("512" in name for name in dispatch):  # an x86-64 build of numpy
        assert set(numpy_avx512_targets(numpy.__version__).split()) <= dispatch


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
    assert got["npy"] is None  # the user's own setting: numpy left as it is


@needs_avx2
def test_a_committed_scorecard_rescores_to_its_bytes(tmp_path):
    # Source: the committed board (leaderboard/scorecards), written on an AVX2 machine. On an
    # AVX-512 machine (Intel Sapphire Rapids) without the pin this rescoring gave another
    # scorecard hash (two per-sample gaps apart in the 10th digit; measured 2026-12-02).
    sub = ROOT / "leaderboard" / "submissions" / "activsg200" / "test-id" / "dc-opf.parquet"
    card = json.loads((ROOT / "leaderboard" / "scorecards" / "activsg200" / "test-id" / "dc-opf.json").read_text())
    out = tmp_path / "dc-opf.scorecard.json"
    env = _env()
    done = subprocess.run([sys.executable, "-c", "import sys; from flowgauge.cli import main; sys.exit(main(sys.argv[1:]))",
                           "score", str(sub), "--out", str(out)], cwd=ROOT,
                          env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert json.loads(out.read_text())["scorecard_hash"] == card["scorecard_hash"]


@needs_avx2
def test_the_test_process_computes_at_the_pinned_level():
    # tests/conftest.py imports flowgauge before numpy, so in-process tests compute as the CLI
    # does; a plugin that loaded numpy first would show here
    from flowgauge._numerics import blas_kernels, numpy_uses_avx512, pinned
    assert pinned()[0], pinned()[1]
    assert set(blas_kernels().values()) <= set(REPRODUCIBLE_KERNELS)
    assert numpy_uses_avx512() is False
