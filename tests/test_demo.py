"""``flowgauge demo``: builds small splits when no frozen ones exist, runs every baseline on
every test split, scores them and prints the comparison."""

import pytest

from flowgauge.cli import main


def test_demo_builds_small_splits_and_compares(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(tmp_path / "no-frozen-splits"))
    work = tmp_path / "work"
    rc = main(["demo", "--workdir", str(work), "--samples", "8"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert "no frozen split demo/train: building one with 8 samples" in err
    assert "built splits" in out
    for baseline in ("dc-opf", "nearest", "linear"):
        for split in ("test-id", "test-ood", "test-edge"):
            assert (work / "predictions" / f"{baseline}.{split}.json").exists()
    rows = [line for line in out.splitlines() if "test-" in line]
    assert len(rows) == 9 and all(" 8 " in row for row in rows)


def test_demo_rejects_bad_sample_count(capsys):
    assert main(["demo", "--samples", "1"]) == 2
    assert "Invalid value for '--samples': 1 is not in the range x>=2." in capsys.readouterr().err


def test_run_demo_checks_samples(tmp_path):
    from flowgauge.baselines import run_demo
    from flowgauge.errors import InputError
    with pytest.raises(InputError, match="expected an integer >= 2, got 0"):
        run_demo(tmp_path, samples=0)
