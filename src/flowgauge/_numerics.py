"""The AVX2 level of arithmetic on every x86-64 machine, so results are the same bytes everywhere.

Two libraries inside numpy's and SciPy's wheels pick their code by CPU when they load:
OpenBLAS its kernels (AVX-512 ones on CPUs that have AVX-512, AVX2 ones otherwise; SuperLU
calls them for its dense blocks) and numpy its vector loops (AVX-512 versions of ``exp``,
``log``, ``arctan2``, ...). Each sums or rounds differently, so the same computation differs in
its last bits from one CPU to the other. Measured on 2026-12-02 on a machine with AVX-512 (Intel
Sapphire Rapids), against files written on an AVX2 machine: 209 of the board's 264 scorecards
rescored to other bytes (values apart in their 10th significant digit) until OpenBLAS was held to
its AVX2 kernels; `flowgauge splits rebuild pegase1354/train` stopped at sample 0 with either
library left to choose, and reproduced all 60 samples and the recipe's identity hash with both
held to AVX2.

So, before numpy or SciPy load, :func:`pin_cpu_level` sets, on x86-64 CPUs with AVX2 and FMA:
``OPENBLAS_CORETYPE=Haswell`` (OpenBLAS's AVX2 and FMA kernels) and, where the CPU has AVX-512,
``NPY_DISABLE_CPU_FEATURES`` to numpy's AVX-512 dispatch targets (their names depend on numpy's
version). A variable the user set is kept; ``FLOWGAUGE_CPU_PIN=0`` turns the pin off. Worker
processes inherit the variables. The pin cannot act once numpy is loaded: a program that imports
numpy before flowgauge, or a Dask worker, needs the variables in its environment
(docs/ranking.md, "Same bytes on every machine"). :func:`blas_kernels` reports what the loaded
OpenBLAS libraries use.
"""

from __future__ import annotations

import os
import platform
import sys
from pathlib import Path

__all__ = ["KERNELS", "REPRODUCIBLE_KERNELS", "pin_cpu_level", "pinned", "blas_kernels", "kernel_note",
           "numpy_avx512_targets"]

VARIABLE = "OPENBLAS_CORETYPE"
NUMPY_VARIABLE = "NPY_DISABLE_CPU_FEATURES"
OFF_VARIABLE = "FLOWGAUGE_CPU_PIN"
KERNELS = "Haswell"  # OpenBLAS's AVX2 + FMA kernel family
# Kernel families that compute as the pinned one (OpenBLAS's Zen kernels are its Haswell ones;
# measured: the same scorecard bytes with either)
REPRODUCIBLE_KERNELS = ("Haswell", "Zen")

_state = {"pinned": False, "reason": "not tried"}


def _cpu_flags() -> set[str]:
    """The CPU's feature flags from /proc/cpuinfo (Linux), else empty."""
    try:
        text = Path("/proc/cpuinfo").read_text(errors="replace")
    except OSError:
        return set()
    for line in text.splitlines():
        if line.startswith("flags"):
            return set(line.split(":", 1)[1].split())
    return set()


def numpy_avx512_targets(version: str) -> str:
    """numpy's dispatch targets that use AVX-512, by numpy version (read off numpy 2.0.2 and
    2.4.6: ``numpy._core._multiarray_umath.__cpu_dispatch__``). A name numpy does not know
    costs an ImportWarning, not an error."""
    try:
        major, minor = (int(x) for x in version.split(".")[:2])
    except ValueError:
        major, minor = 2, 4
    if (major, minor) >= (2, 4):
        return "X86_V4 AVX512_ICL AVX512_SPR"
    return "AVX512F AVX512CD AVX512_KNL AVX512_KNM AVX512_SKX AVX512_CLX AVX512_CNL AVX512_ICL"


def _numpy_version() -> str:
    from importlib.metadata import PackageNotFoundError, version
    try:
        return version("numpy")
    except PackageNotFoundError:
        return "2.4"


def pin_cpu_level() -> bool:
    """Hold OpenBLAS and numpy to their AVX2 code (module docstring); True if this process will
    use it by our setting. Does nothing where the user set the variables or turned the pin off,
    where numpy is already loaded, off x86-64, or on a CPU without AVX2 and FMA."""
    if os.environ.get(OFF_VARIABLE, "").strip() in ("0", "no", "off", "false"):
        _state.update(pinned=False, reason=f"{OFF_VARIABLE}={os.environ[OFF_VARIABLE]} turned the pin off")
    elif VARIABLE in os.environ:
        _state.update(pinned=False, reason=f"{VARIABLE}={os.environ[VARIABLE]} was set by the environment")
    elif "numpy" in sys.modules or "scipy" in sys.modules:
        _state.update(pinned=False, reason="numpy was imported before flowgauge")
    elif platform.machine().lower() not in ("x86_64", "amd64"):
        _state.update(pinned=False, reason=f"not an x86-64 machine ({platform.machine()})")
    else:
        flags = _cpu_flags()
        if not {"avx2", "fma"} <= flags:
            _state.update(pinned=False, reason="the CPU flags show no AVX2 and FMA (or could not be read)")
        else:
            os.environ[VARIABLE] = KERNELS
            what = f"{VARIABLE}={KERNELS}"
            if "avx512f" in flags and NUMPY_VARIABLE not in os.environ:
                os.environ[NUMPY_VARIABLE] = numpy_avx512_targets(_numpy_version())
                what += f" and {NUMPY_VARIABLE}={os.environ[NUMPY_VARIABLE]}"
            _state.update(pinned=True, reason=f"{what} set by flowgauge")
    return bool(_state["pinned"])


def pinned() -> tuple[bool, str]:
    """Whether flowgauge pinned the CPU level in this process, and why (not)."""
    return bool(_state["pinned"]), str(_state["reason"])


def blas_kernels() -> dict[str, str]:
    """The kernel family of the OpenBLAS libraries of numpy and SciPy loaded in this process, by
    file name (Linux: read from /proc/self/maps); empty where none is loaded or this cannot be
    read. Other OpenBLAS copies (casadi brings one for Ipopt) are left out: flowgauge does not
    compute with them."""
    import ctypes

    try:
        maps = Path(f"/proc/{os.getpid()}/maps").read_text(errors="replace")
    except OSError:
        return {}
    libs = sorted({path for path in (line.split()[-1] for line in maps.splitlines() if line.strip())
                   if "openblas" in path.lower() and ".so" in path and ("numpy" in path or "scipy" in path)})
    out: dict[str, str] = {}
    for path in libs:
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for sym in ("openblas_get_corename", "scipy_openblas_get_corename64_", "scipy_openblas_get_corename",
                    "openblas_get_corename64_"):
            fn = getattr(lib, sym, None)
            if fn is not None:
                fn.restype = ctypes.c_char_p
                out[Path(path).name] = (fn() or b"").decode("ascii", "replace").strip()
                break
    return out


def numpy_uses_avx512() -> bool:
    """Whether numpy dispatches to AVX-512 loops in this process."""
    try:
        import numpy as np
        feats = np._core._multiarray_umath.__cpu_features__
        targets = np._core._multiarray_umath.__cpu_dispatch__
    except (ImportError, AttributeError):
        return False
    return any(feats.get(t, False) for t in targets if "512" in t or t == "X86_V4")


def kernel_note() -> str:
    """One sentence for a failed byte-for-byte check (a board scorecard, a split rebuilt from its
    recipe) when this process computes at another CPU level than the committed files (OpenBLAS's
    AVX2 kernels, numpy without AVX-512 loops), else ''."""
    other = sorted({v for v in blas_kernels().values() if v not in REPRODUCIBLE_KERNELS})
    parts = []
    if other:
        parts.append(f"OpenBLAS's {', '.join(other)} kernels")
    if numpy_uses_avx512():
        parts.append("numpy's AVX-512 loops")
    if not parts:
        return ""
    return (f"computed here with {' and '.join(parts)}, the committed files at the AVX2 level ({pinned()[1]}): run with "
            f"{VARIABLE}={KERNELS} and {NUMPY_VARIABLE}=\"{numpy_avx512_targets(_numpy_version())}\"")
