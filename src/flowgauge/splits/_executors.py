"""Where chunks run: in this process, in local worker processes, or on a Dask cluster.

Each executor yields ``(task, result)`` as chunks finish, in any order; the builder writes each
chunk as it arrives, so the order never changes the split.
"""

from __future__ import annotations

from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from typing import Any, Callable, Iterable, Iterator

from .._workers import pool_initializer
from ..errors import InputError

__all__ = ["run_tasks"]


def _serial(fn: Callable, tasks: list) -> Iterator[tuple[Any, Any]]:
    for task in tasks:
        yield task, fn(*task)


def _local(fn: Callable, tasks: list, workers: int) -> Iterator[tuple[Any, Any]]:
    with ProcessPoolExecutor(max_workers=workers, **pool_initializer()) as pool:
        pending = {pool.submit(fn, *task): task for task in tasks}
        try:
            while pending:
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in sorted(done, key=lambda f: pending[f][1]):
                    task = pending.pop(fut)
                    yield task, fut.result()
        finally:
            for fut in pending:
                fut.cancel()


def _dask(fn: Callable, tasks: list, address: str) -> Iterator[tuple[Any, Any]]:
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise InputError("a Dask scheduler needs the optional extra 'cluster' "
                         "(pip install 'flowgauge[cluster]')", where="--scheduler") from None
    try:
        client = Client(address, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler ({exc})", where=address) from None
    try:
        futures = {}
        for task in tasks:
            fut = client.submit(fn, *task, pure=False)
            futures[fut.key] = (fut, task)
        for fut in as_completed([f for f, _ in futures.values()]):
            yield futures[fut.key][1], fut.result()
    finally:
        client.close()


def run_tasks(fn: Callable, tasks: Iterable[tuple], *, workers: int = 1,
              scheduler: str | None = None) -> Iterator[tuple[Any, Any]]:
    """Run ``fn(*task)`` for every task; yield ``(task, result)`` as each finishes."""
    tasks = list(tasks)
    if scheduler:
        return _dask(fn, tasks, scheduler)
    if workers <= 1 or len(tasks) <= 1:
        return _serial(fn, tasks)
    return _local(fn, tasks, workers)
