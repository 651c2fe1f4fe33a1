"""Worker processes that exit when their parent dies.

A ``ProcessPoolExecutor`` worker whose parent is killed (``kill -9``, an out-of-memory kill)
is not told: it waits on its task queue forever, holding its memory. :func:`init_worker`,
given as the pool's ``initializer``, makes the worker follow its parent: on Linux the kernel
sends it SIGKILL when the parent thread that started it exits (``prctl(PR_SET_PDEATHSIG)``);
everywhere, a daemon thread polls the parent's process id and ends the worker once the parent
is gone (the worker is then re-parented, so ``os.getppid()`` changes).
"""

from __future__ import annotations

import os
import signal
import sys
import threading
import time
from typing import Any, Callable

__all__ = ["init_worker", "pool_initializer", "POLL_SECONDS"]

POLL_SECONDS = 1.0  # how often the watchdog thread looks at the parent's process id
_PR_SET_PDEATHSIG = 1  # from <linux/prctl.h>


def _set_parent_death_signal() -> bool:
    """Ask the Linux kernel for SIGKILL when the parent exits; False where unavailable."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        return libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def _watch_parent(parent: int, poll: float) -> None:
    while True:
        if os.getppid() != parent:
            os._exit(1)  # no cleanup: the parent that would collect the results is gone
        time.sleep(poll)


def init_worker(parent_pid: int, poll: float = POLL_SECONDS) -> None:
    """Make this worker process exit when the process ``parent_pid`` dies.

    ``parent_pid`` is the pool owner's ``os.getpid()``, taken before the pool starts: if the
    parent died before this runs, the worker exits at once."""
    _set_parent_death_signal()
    if os.getppid() != parent_pid:  # the parent died before the death signal was armed
        os._exit(1)
    threading.Thread(target=_watch_parent, args=(parent_pid, poll), name="parent-watchdog",
                     daemon=True).start()


def _chained(parent_pid: int, then: Callable[..., Any] | None, args: tuple) -> None:
    init_worker(parent_pid)
    if then is not None:
        then(*args)


def pool_initializer(then: Callable[..., Any] | None = None, args: tuple = ()) -> dict[str, Any]:
    """Keyword arguments for ``ProcessPoolExecutor``: ``initializer`` and ``initargs`` that
    run :func:`init_worker`, then ``then(*args)`` (the pool's own initializer, if any)."""
    return {"initializer": _chained, "initargs": (os.getpid(), then, tuple(args))}
