"""``score`` and ``validate`` check the split files they read against the manifest's hashes,
as ``splits verify`` does: a changed file stops them with exit 3 naming the file and column."""

import shutil

import pyarrow.parquet as pq
import pyarrow as pa

from flowgauge.cli import main

from test_scoring_support import split, split_path, write_reference


def _tampered_copy(tmp_path):
    folder = tmp_path / "ieee14-test-id"
    shutil.copytree(split_path("ieee14", "test-id"), folder)
    path = folder / "references.parquet"
    table = pq.read_table(path)
    i = table.schema.get_field_index("objective_per_h")
    halved = pa.compute.multiply(table.column(i), 0.5)
    pq.write_table(table.set_column(i, table.schema.field(i), halved), path)
    return folder


def test_score_and_validate_refuse_a_changed_split(tmp_path, capsys):
    preds = write_reference(split("ieee14", "test-id"), tmp_path / "ref.json")
    folder = _tampered_copy(tmp_path)
    out = tmp_path / "card.json"
    assert main(["score", str(preds), "--split", str(folder), "--out", str(out)]) == 3
    err = capsys.readouterr().err
    assert "references.parquet" in err and "column objective_per_h differs from the manifest" in err
    assert not out.exists()
    assert main(["validate", str(preds), "--split", str(folder)]) == 3
    err = capsys.readouterr().err
    assert "references.parquet" in err and "column objective_per_h differs from the manifest" in err
    # the untouched split scores
    assert main(["score", str(preds), "--split", str(split_path("ieee14", "test-id")), "--out", str(out)]) == 0
