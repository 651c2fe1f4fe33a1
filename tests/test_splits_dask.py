"""The Dask path survives a worker killed mid-build: the build finishes with the same hashes as a
serial build. Chunks depend only on (seed, sample, attempt), so a chunk rerun elsewhere gives the
same bytes (docs/splits.md, "Distributed builds")."""

import os
import signal
import time

import pytest

from flowgauge.splits import build_split

distributed = pytest.importorskip("dask.distributed")
dask = pytest.importorskip("dask")

SEED = 11
SAMPLES = 24
CHUNK = 2  # 12 tasks: several still in flight when the worker dies


def _hashes(m):
    f = m["files"]
    return f["inputs"]["hash"], f["references"]["solution_hash"], m["identity_hash"], m["rejected"]


@pytest.fixture(scope="module")
def serial(tmp_path_factory):
    out = tmp_path_factory.mktemp("serial") / "ieee14" / "test-edge"
    return build_split("ieee14", "test-edge", samples=SAMPLES, seed=SEED, out=out, chunk=CHUNK)


def _busy_worker_pid(cluster, timeout=20.0):
    """(address, pid) of a worker that is running a task now, read from the scheduler's own
    records (no second client calls into the cluster while the build's client runs)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        for ws in list(cluster.scheduler.workers.values()):
            if ws.processing and ws.pid:
                return ws.address, ws.pid
        time.sleep(0.01)
    raise AssertionError("no worker was running a task")


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as c, distributed.Client(c) as client:
        yield c, client


# allowed-failures 3 (Dask's default): the scheduler reruns the dead worker's tasks itself;
# 0: the dead worker's running task comes back as KilledWorker and the builder submits it again
@pytest.mark.parametrize("allowed_failures", [3, 0])
def test_a_worker_killed_mid_build_changes_nothing(serial, cluster, tmp_path, allowed_failures):
    cluster, client = cluster
    client.wait_for_workers(2, timeout=30)  # the nanny restarts a worker killed by the test before
    cluster.scheduler.allowed_failures = allowed_failures  # read by the scheduler at each death
    killed = {}

    def kill_once_some_chunks_finished(p):
        if not killed and p.solved >= 2 * CHUNK:
            addr, pid = _busy_worker_pid(cluster)
            os.kill(pid, signal.SIGKILL)
            killed.update(addr=addr, pid=pid, solved=p.solved)

    m = build_split("ieee14", "test-edge", samples=SAMPLES, seed=SEED, out=tmp_path / "dask", chunk=CHUNK,
                    scheduler=cluster.scheduler_address, progress=kill_once_some_chunks_finished)
    assert killed and killed["solved"] < SAMPLES  # killed mid-build, while it ran a chunk
    assert killed["pid"] not in client.run(os.getpid).values()  # that process is gone
    assert _hashes(m) == _hashes(serial)
