"""One family of BLAS kernels on every x86-64 machine, so scores are the same bytes everywhere.

OpenBLAS, the BLAS inside numpy's and SciPy's wheels, picks its kernels by CPU when it loads:
AVX-512 kernels on CPUs that have AVX-512, AVX2 kernels on the others. The two sum in different
orders, so the same computation differs in its last bits from one CPU to the other. The scorer
meets BLAS through SciPy's sparse LU (SuperLU calls it for its dense blocks) and a few dot
products; measured on 2026-12-02, on an AVX-512 machine (Intel Sapphire Rapids) 209 of the
board's 264 scorecards rescored to other bytes than on the AVX2 machine that wrote them (values
apart in the 10th significant digit); with the AVX2 kernels asked for, all 264 were the same
bytes. numpy's own CPU dispatch (its AVX-512 loops) changed none of them.

So, before numpy or SciPy load, :func:`pin_blas_kernels` sets ``OPENBLAS_CORETYPE=Haswell``
(OpenBLAS's name for its AVX2 and FMA kernels) when the CPU has AVX2 and FMA and the variable is
not set already; worker processes inherit it. It cannot act once OpenBLAS is loaded: a program
that imports numpy before flowgauge, or a Dask worker, needs the variable in its environment
(docs/ranking.md, "Same bytes on every machine"). :func:`blas_kernels` reports what the loaded
OpenBLAS libraries use.
"""

from __future__ import annotations

import os
import platform
import sys
from pathlib import Path

__all__ = ["KERNELS", "REPRODUCIBLE_KERNELS", "pin_blas_kernels", "pinned", "blas_kernels", "kernel_note"]

VARIABLE = "OPENBLAS_CORETYPE"
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


def pin_blas_kernels() -> bool:
    """Ask OpenBLAS for its AVX2 kernels (module docstring); True if this process will use them
    by our setting. Does nothing where the user set the variable, where OpenBLAS is already
    loaded (numpy imported first), off x86-64 Linux, or on a CPU without AVX2 and FMA."""
    if VARIABLE in os.environ:
        _state.update(pinned=False, reason=f"{VARIABLE}={os.environ[VARIABLE]} was set by the environment")
    elif "numpy" in sys.modules or "scipy" in sys.modules:
        _state.update(pinned=False, reason="numpy was imported before flowgauge")
    elif platform.machine().lower() not in ("x86_64", "amd64"):
        _state.update(pinned=False, reason=f"not an x86-64 machine ({platform.machine()})")
    elif not {"avx2", "fma"} <= _cpu_flags():
        _state.update(pinned=False, reason="the CPU flags show no AVX2 and FMA (or could not be read)")
    else:
        os.environ[VARIABLE] = KERNELS
        _state.update(pinned=True, reason=f"{VARIABLE}={KERNELS} set by flowgauge")
    return bool(_state["pinned"])


def pinned() -> tuple[bool, str]:
    """Whether flowgauge pinned the kernels in this process, and why (not)."""
    return bool(_state["pinned"]), str(_state["reason"])


def blas_kernels() -> dict[str, str]:
    """The kernel family of every OpenBLAS library loaded in this process, by file name
    (Linux: read from /proc/self/maps); empty where none is loaded or this cannot be read."""
    import ctypes

    try:
        maps = Path(f"/proc/{os.getpid()}/maps").read_text(errors="replace")
    except OSError:
        return {}
    libs = sorted({line.split()[-1] for line in maps.splitlines()
                   if "openblas" in line.lower() and ".so" in line.split()[-1]})
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


def kernel_note() -> str:
    """One sentence for a failed byte-for-byte check when this process computes with other
    kernels than the board's, else ''."""
    other = {k: v for k, v in blas_kernels().items() if v not in REPRODUCIBLE_KERNELS}
    if not other:
        return ""
    names = ", ".join(sorted(set(other.values())))
    return f"computed here with OpenBLAS's {names} kernels, the board with its AVX2 ones ({pinned()[1]}): run with {VARIABLE}={KERNELS}"
