"""The spanning design's pilot: its draws run on the build's workers and the fitted pilot is kept
beside the chunks, so that a resumed build (another process, another day) does not solve it
again. Neither may change a bit of the split."""

import pytest

from flowgauge.network import load_network
from flowgauge.splits import _spanning, build_split
from flowgauge.splits._builder import partial_dir
from flowgauge.splits._executors import run_tasks
from flowgauge.splits._spanning import Spanning

PILOT_ARRAYS = ("weights", "power_factor", "fraction", "regime", "probability")


def _same_pilot(a: Spanning, b: Spanning) -> None:
    assert a.fraction == b.fraction
    for k in PILOT_ARRAYS:
        assert a.pilot[k].tobytes() == b.pilot[k].tobytes(), k


@pytest.fixture
def no_pilots_in_memory(monkeypatch):
    """As in a new process: no pilot solved earlier in this one."""
    monkeypatch.setattr(_spanning, "_PILOTS", {})


def _fails(*args, **kwargs):
    raise AssertionError("the pilot was solved again")


def test_pilot_on_two_worker_processes_is_the_serial_pilot(no_pilots_in_memory):
    net = load_network("ieee14")
    design = Spanning(pilot_draws=12, pilot_seed=7)
    serial = design.fitted(net)
    _spanning._PILOTS.clear()
    spread = design.fitted(net, run=lambda fn, tasks: run_tasks(fn, tasks, workers=2))
    _same_pilot(serial, spread)
    assert serial.pilot["fraction"].size >= 6  # most of the 12 draws are feasible on ieee14


def test_kept_pilot_is_read_back_and_an_altered_one_solved_again(no_pilots_in_memory, tmp_path, monkeypatch):
    net = load_network("ieee14")
    design = Spanning(pilot_draws=8, pilot_seed=11)
    first = design.fitted(net, store=tmp_path)
    (kept,) = tmp_path.glob("pilot-*.npz")
    _spanning._PILOTS.clear()
    monkeypatch.setattr(Spanning, "_pilot", _fails)
    _same_pilot(first, design.fitted(net, store=tmp_path))  # read back, not solved
    # another design's key never reads this file
    monkeypatch.undo()
    monkeypatch.setattr(_spanning, "_PILOTS", {})
    other = Spanning(pilot_draws=8, pilot_seed=12).fitted(net, store=tmp_path)
    assert len(list(tmp_path.glob("pilot-*.npz"))) == 2
    assert other.pilot["weights"].tobytes() != first.pilot["weights"].tobytes()
    # a damaged file is solved again (and rewritten), giving the same pilot
    raw = bytearray(kept.read_bytes())
    raw[len(raw) // 2] ^= 0xFF
    kept.write_bytes(bytes(raw))
    _spanning._PILOTS.clear()
    solved = []
    real = Spanning._pilot
    monkeypatch.setattr(Spanning, "_pilot", lambda self, *a, **k: solved.append(1) or real(self, *a, **k))
    again = design.fitted(net, store=tmp_path)
    _same_pilot(first, again)
    assert solved == [1]
    _spanning._PILOTS.clear()  # the rewritten file is read back
    monkeypatch.setattr(Spanning, "_pilot", _fails)
    _same_pilot(first, design.fitted(net, store=tmp_path))


def test_resumed_build_reads_its_pilot_and_gives_the_same_split(no_pilots_in_memory, tmp_path, monkeypatch):
    whole = build_split("ieee14", "test-id", samples=6, seed=42, out=tmp_path / "whole", chunk=3)
    out = tmp_path / "ieee14" / "test-id"

    def stop_after_first_chunk(p):
        if p.solved >= 3:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        build_split("ieee14", "test-id", samples=6, seed=42, out=out, chunk=3, progress=stop_after_first_chunk)
    assert len(list(partial_dir(out).glob("pilot-*.npz"))) == 1
    _spanning._PILOTS.clear()  # a new process
    monkeypatch.setattr(Spanning, "_pilot", _fails)
    m = build_split("ieee14", "test-id", samples=6, seed=42, out=out, chunk=3)
    assert m["identity_hash"] == whole["identity_hash"]
    assert m["design"]["parameters"]["pilot_hash"] == whole["design"]["parameters"]["pilot_hash"]
    assert not partial_dir(out).exists()


def test_build_stopped_before_its_first_chunk_leaves_no_trace(tmp_path):
    out = tmp_path / "ieee14" / "test-id"

    def stop_at_once(p):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        build_split("ieee14", "test-id", samples=3, seed=42, out=out, chunk=3, progress=stop_at_once)
    assert not partial_dir(out).exists() and not out.exists()
