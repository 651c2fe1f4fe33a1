"""The Dask executor's handling of chunks that come back without a result: a result lost with its
worker is run again, a chunk that keeps failing stops the build with a message naming it, and a
task's own error is raised as it is. A scripted stand-in for the cluster's client decides how
each submission ends (the real cluster is exercised in test_splits_dask.py, where a killed
worker's chunk is recomputed by Dask itself)."""

from __future__ import annotations

import pytest

pytest.importorskip("dask.distributed")

import dask.distributed  # noqa: E402
from distributed.scheduler import KilledWorker  # noqa: E402

from flowgauge.errors import InputError  # noqa: E402
from flowgauge.splits import _executors  # noqa: E402

LOST = RuntimeError("Task is bound to a different event loop")  # what the client raised under load


class _Future:
    def __init__(self, key, value=None, exc=None, status="finished"):
        self.key, self._value, self._exc, self.status = key, value, exc, status
        self.released = False

    def result(self):
        if self._exc is not None:
            raise self._exc
        return self._value

    def release(self):
        self.released = True


class _Queue:
    def __init__(self, futures):
        self._items = list(futures)

    def add(self, fut):
        self._items.append(fut)

    def __iter__(self):
        while self._items:
            yield self._items.pop(0)


class _Client:
    """Each submission of a chunk ends as the next outcome of its script: ("ok",), ("lost",),
    ("killed",) or ("error",); the shared first argument is always delivered."""

    def __init__(self, script):
        self.script = {k: list(v) for k, v in script.items()}
        self.submitted: list = []
        self.closed = False

    def close(self):
        self.closed = True

    def submit(self, fn, *args, pure=True, retries=None):
        key = f"k{len(self.submitted)}"
        # the cluster hands a task the value of a future passed as its argument
        args = tuple(a.result() if isinstance(a, _Future) else a for a in args)
        self.submitted.append(args)
        if fn is _executors._pass:
            return _Future(key, value=args[0])
        outcome = self.script[args[1]].pop(0)
        if outcome == "ok":
            return _Future(key, value=fn(*args))
        if outcome == "lost":
            return _Future(key, exc=LOST, status="lost")
        if outcome == "killed":
            return _Future(key, exc=KilledWorker("chunk", "tcp://worker", 3), status="erred")
        return _Future(key, exc=ValueError("the task's own error"), status="error")


def _chunk(job, start, stop):
    return (job, start, stop)


@pytest.fixture
def cluster(monkeypatch):
    holder = {}

    def make(script):
        client = _Client(script)
        holder["client"] = client
        monkeypatch.setattr(dask.distributed, "Client", lambda address, timeout=None: client)
        monkeypatch.setattr(dask.distributed, "as_completed", _Queue)
        return client
    return make


def test_a_lost_result_is_run_again(cluster):
    client = cluster({0: ["lost", "ok"], 10: ["ok"]})
    out = dict(_executors._dask(_chunk, [("job", 0, 10), ("job", 10, 20)], "tcp://scheduler"))
    assert out == {("job", 0, 10): ("job", 0, 10), ("job", 10, 20): ("job", 10, 20)}
    # the shared job once, chunk 0 twice, chunk 10 once
    assert [a[1] for a in client.submitted[1:]] == [0, 10, 0]


def test_a_result_lost_every_time_stops_the_build_naming_the_chunk(cluster):
    client = cluster({0: ["ok"], 10: ["lost"] * (_executors.RESUBMITS + 1)})
    with pytest.raises(InputError) as err:
        dict(_executors._dask(_chunk, [("job", 0, 10), ("job", 10, 20)], "tcp://scheduler"))
    text = str(err.value)
    assert "samples 10..19" in text
    assert f"lost this chunk's result {_executors.RESUBMITS + 1} times" in text
    assert "different event loop" in text and "out of memory" not in text
    assert client.closed
    assert sum(1 for a in client.submitted[1:] if a[1] == 10) == _executors.RESUBMITS + 1


def test_a_chunk_that_keeps_killing_workers_gets_the_memory_message(cluster):
    cluster({0: ["killed"] * (_executors.RESUBMITS + 1)})
    with pytest.raises(InputError, match="killed Dask workers 4 times over.*out of memory") as err:
        dict(_executors._dask(_chunk, [("job", 0, 10)], "tcp://scheduler"))
    assert "samples 0..9" in str(err.value)


def test_a_tasks_own_error_is_raised_without_a_rerun(cluster):
    client = cluster({0: ["error", "ok"]})
    with pytest.raises(ValueError, match="the task's own error"):
        dict(_executors._dask(_chunk, [("job", 0, 10)], "tcp://scheduler"))
    assert [a[1] for a in client.submitted[1:]] == [0]
