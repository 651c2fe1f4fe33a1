"""Where chunks run: in this process, in local worker processes, or on a Dask cluster.

Each executor yields ``(task, result)`` as chunks finish, in any order; the builder writes each
chunk as it arrives, so the order never changes the split.
"""

from __future__ import annotations

from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from typing import Any, Callable, Iterable, Iterator

from .._io import clip_text
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


def _pass(value: Any) -> Any:
    return value


def _shared_first_arguments(client, tasks: list) -> dict[int, Any]:
    """One cluster future per distinct first argument (the build's Job: the network and the
    design's pilot, megabytes on a large network), so it travels to each worker once instead of
    inside every task. It is a task, not scattered data: if every worker holding it dies, the
    scheduler computes it again from its spec."""
    shared: dict[int, Any] = {}
    for task in tasks:
        if task and id(task[0]) not in shared:
            shared[id(task[0])] = client.submit(_pass, task[0], pure=False)
    return shared


def _chunk_name(task: tuple) -> str:
    return f"samples {task[1]}..{task[2] - 1}" if len(task) == 3 else "a task"


# How often one task may be handed back to us after its workers died (each hand-back is Dask's
# own ``distributed.scheduler.allowed-failures`` deaths, default 3) before the build stops.
RESUBMITS = 3


def _dask(fn: Callable, tasks: list, address: str, resubmits: int = RESUBMITS) -> Iterator[tuple[Any, Any]]:
    """Run on a Dask cluster, surviving workers that die mid-build.

    A worker that dies (killed, out of memory, its machine gone) loses the tasks it was running
    and the results it held: the scheduler reruns them on the remaining or restarted workers
    (Dask's own resilience: we hold every future until its result is fetched). A task that
    killed ``allowed-failures`` workers in a row comes back as ``KilledWorker``; it is submitted
    again, up to ``resubmits`` times, then the build stops naming the chunk (finished chunks are
    kept: rerun to resume). A chunk depends only on (seed, sample, attempt), so a rerun gives
    the same bytes. Each result is released once fetched, so the cluster's memory holds only
    the chunks in flight, however long the build.
    """
    try:
        from dask.distributed import Client, as_completed
        from distributed.scheduler import KilledWorker
    except ImportError:
        raise InputError("a Dask scheduler needs the optional extra 'cluster' "
                         "(pip install 'flowgauge[cluster]')", where="--scheduler") from None
    try:
        client = Client(address, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler ({exc})", where=address) from None
    try:
        shared = _shared_first_arguments(client, tasks)

        def submit(task):
            # pure=False: a resubmitted task gets a new key, never the failed one's state
            return client.submit(fn, shared.get(id(task[0]), task[0]), *task[1:], pure=False, retries=0)
        pending = {}  # key -> (task, times handed back)
        futures = []
        for task in tasks:
            fut = submit(task)
            pending[fut.key] = (task, 0)
            futures.append(fut)
        queue = as_completed(futures)
        del futures  # the queue and ``pending`` hold what is still to come
        for fut in queue:
            task, tries = pending.pop(fut.key)
            try:
                result = fut.result()
            except Exception as exc:
                if not isinstance(exc, KilledWorker) and fut.status == "error":
                    raise  # the task's own error
                # KilledWorker, or the result was lost with its worker before it reached us (the
                # client then fails while it waits for the recomputation): run the task again
                if tries >= resubmits and isinstance(exc, KilledWorker):
                    raise InputError(f"this chunk killed Dask workers {tries + 1} times over (each time as many "
                                     "as the scheduler allows): out of memory? Finished chunks are kept; give the "
                                     "workers more memory and rerun to resume", where=_chunk_name(task)) from None
                if tries >= resubmits:
                    raise InputError(f"the cluster lost this chunk's result {tries + 1} times over (its workers left, "
                                     f"or the scheduler is unreachable: {clip_text(str(exc) or type(exc).__name__, 120)}"
                                     "). Finished chunks are kept; rerun to resume", where=_chunk_name(task)) from None
                again = submit(task)
                pending[again.key] = (task, tries + 1)
                queue.add(again)
                continue
            finally:
                fut.release()  # the cluster keeps no result we already have
            yield task, result
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
