"""Splits: an interrupted build resumed with other settings refuses (naming the setting) unless
--fresh; a split whose vector columns pandas rewrote as list<double> still verifies and
predicts; the frozen splits still verify with the seed rule their manifests record."""

from __future__ import annotations

import shutil

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.splits import build_split, splits_root
from flowgauge.splits._builder import partial_dir


def _interrupted(out, seed):
    def stop(p):
        if p.solved >= 1:
            raise KeyboardInterrupt
    with pytest.raises(KeyboardInterrupt):
        build_split("ieee14", "train", samples=2, seed=seed, out=out, chunk=1, progress=stop)
    assert len(list((partial_dir(out) / "chunks").glob("*.npz"))) == 1


def test_resume_with_another_seed_refuses_naming_the_seed(tmp_path):
    out = tmp_path / "ieee14" / "train"
    _interrupted(out, seed=7)
    with pytest.raises(InputError, match=r"holds chunks of an interrupted build with another seed \(earlier build: "
                                         r"7; now: 8\); rerun with the same settings to resume, or with --fresh"):
        build_split("ieee14", "train", samples=2, seed=8, out=out, chunk=1)
    assert len(list((partial_dir(out) / "chunks").glob("*.npz"))) == 1  # nothing deleted


def test_resume_refusal_on_the_command_line_and_fresh(tmp_path, capsys):
    out = tmp_path / "ieee14" / "train"
    _interrupted(out, seed=7)
    rc = main(["splits", "build", "ieee14", "--split", "train", "--samples", "2", "--seed", "7", "--chunk", "2",
               "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert rc == 2 and err.count("\n") == 1
    assert err.startswith(f"Error: {partial_dir(out)}: holds chunks of an interrupted build with another chunk "
                          "(earlier build: 1; now: 2)")

    def stop_at_once(p):
        raise KeyboardInterrupt
    with pytest.raises(KeyboardInterrupt):  # --fresh deletes the old chunks before anything else
        build_split("ieee14", "train", samples=2, seed=7, out=out, chunk=2, fresh=True, progress=stop_at_once)
    assert not list((partial_dir(out) / "chunks").glob("*.npz"))


@pytest.fixture
def pandas_split(tmp_path):
    """The frozen ieee14 test-id split with its Parquet files rewritten through pandas, which
    stores the fixed-size vectors as list<double>."""
    folder = tmp_path / "ieee14" / "test-id"
    shutil.copytree(splits_root() / "ieee14" / "test-id", folder)
    train = tmp_path / "ieee14" / "train"
    shutil.copytree(splits_root() / "ieee14" / "train", train)
    for name in ("inputs.parquet", "references.parquet"):
        df = pq.read_table(folder / name).to_pandas()
        table = pa.Table.from_pandas(df, preserve_index=False)
        assert pa.types.is_list(table.schema.field("pd_mw" if name == "inputs.parquet" else "pg_mw").type)
        pq.write_table(table, folder / name)
    return folder


def test_splits_verify_reads_list_double_columns(pandas_split, capsys):
    rc = main(["splits", "verify", str(pandas_split)])
    out, err = capsys.readouterr()
    assert rc == 0, err
    assert out.startswith("ok  ieee14/test-id  500 samples")


def test_baseline_reads_list_double_columns(pandas_split, tmp_path, capsys):
    rc = main(["baseline", "nearest", "--split", str(pandas_split), "--out", str(tmp_path / "b.json")])
    assert rc == 0, capsys.readouterr().err
    assert (tmp_path / "b.json").exists()


def test_ragged_list_column_is_one_line(pandas_split, capsys):
    path = pandas_split / "inputs.parquet"
    t = pq.read_table(path)
    rows = t.column("pd_mw").to_pylist()
    rows[3] = rows[3][:-1]
    t = t.set_column(t.schema.get_field_index("pd_mw"), "pd_mw", pa.array(rows, pa.list_(pa.float64())))
    pq.write_table(t, path)
    rc = main(["splits", "verify", str(pandas_split)])
    err = capsys.readouterr().err
    assert rc == 3
    assert err == (f"Error: column pd_mw: expected one number per element in every row (rows of different "
                   "lengths or nulls)\n")


def test_frozen_splits_verify_under_the_seed_rule_they_record(capsys):
    assert main(["splits", "verify", "ieee14/test-id", "demo/train"]) == 0
    assert capsys.readouterr().out.count("ok  ") == 2
