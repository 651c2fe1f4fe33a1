"""Per-sample states in a split's inputs (splits/_store.py, splits/_load.py): optional Parquet
flag columns, Split.state / state_network / graph, and splits without them unchanged."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from flowgauge._io import hash_arrays
from flowgauge.errors import InputError
from flowgauge.splits import load_split
from flowgauge.splits._load import splits_root
from flowgauge.splits._store import (STATE_COLUMNS, columns_hash, inputs_table, read_table,
                                     state_from_table, table_columns, write_table)

FROZEN = "ieee14/test-id"


@pytest.fixture(scope="module")
def frozen():
    return load_split(FROZEN, references=False)


def test_frozen_split_without_states_loads_and_hashes_as_recorded(frozen):
    # outside record: the manifest's hashes, written when the split was frozen
    m = frozen.manifest
    path = frozen.path / m["files"]["inputs"]["path"]
    cols = table_columns(read_table(path))
    assert hash_arrays(cols) == m["files"]["inputs"]["hash"]
    assert not frozen.has_states and frozen.branch_in_service is None
    # the builder's call without states writes the same columns and the same hash
    t = inputs_table(frozen.sample_id, frozen.pd_mw, frozen.qd_mvar, kind=frozen.kind)
    assert t.column_names == ["sample_id", "pd_mw", "qd_mvar", "kind"]
    assert columns_hash(t) == m["files"]["inputs"]["hash"]
    assert state_from_table(read_table(path), path, 20, 5) is None
    # without states every sample is the intact network: ieee14 has 20 branches, 5 generators
    br, gen = frozen.state(0)
    assert br.shape == (20,) and gen.shape == (5,) and br.all() and gen.all()
    assert frozen.state_network(0) is frozen.network
    assert frozen.graph(0).edge_index.shape == (20, 2)


@pytest.fixture()
def with_states(tmp_path, frozen):
    """A copy of the frozen split whose inputs carry states: sample row 0 has branch 0 (1-2)
    out, row 1 generator 1 (bus 2) out, row 2 branch 13 (7-8, bus 8's only connection) out."""
    folder = tmp_path / "ieee14" / "test-id"
    shutil.copytree(frozen.path, folder)
    s = frozen.n_samples
    br = np.ones((s, 20), bool)
    gen = np.ones((s, 5), bool)
    br[0, 0] = False
    gen[1, 1] = False
    br[2, 13] = False
    t = inputs_table(frozen.sample_id, frozen.pd_mw, frozen.qd_mvar, kind=frozen.kind,
                     branch_in_service=br, gen_in_service=gen)
    write_table(t, folder / "inputs.parquet")
    return folder, br, gen


def test_state_columns_round_trip_through_an_independent_reader(with_states):
    folder, br, gen = with_states
    path = folder / "inputs.parquet"
    # reference reader: pyarrow's schema and pandas, without flowgauge's reader
    schema = pq.read_schema(path)
    assert schema.field("branch_in_service").type == pa.list_(pa.bool_(), 20)
    assert schema.field("gen_in_service").type == pa.list_(pa.bool_(), 5)
    df = pd.read_parquet(path)
    np.testing.assert_array_equal(np.stack(df["branch_in_service"].to_numpy()), br)
    np.testing.assert_array_equal(np.stack(df["gen_in_service"].to_numpy()), gen)
    # the content hash sees bool flags (hash_arrays: kind "bool"), the same before and after the file
    t = read_table(path)
    cols = table_columns(t)
    assert cols["branch_in_service"].dtype == bool
    assert hash_arrays(cols) == columns_hash(inputs_table(
        cols["sample_id"], cols["pd_mw"], cols["qd_mvar"], kind=cols["kind"],
        branch_in_service=br, gen_in_service=gen))
    # a pandas rewrite (list<bool>) reads as the same flags
    pq.write_table(pa.Table.from_pandas(df, preserve_index=False), folder / "rewritten.parquet")
    again = state_from_table(read_table(folder / "rewritten.parquet"), path, 20, 5)
    np.testing.assert_array_equal(again[0], br)


def test_split_state_and_graph_follow_the_flags(with_states):
    folder, br, gen = with_states
    s = load_split(folder, references=False)
    assert s.has_states
    b0, g0 = s.state(0)
    np.testing.assert_array_equal(b0, br[0])
    # PYPOWER case14: 20 branches; with 1-2 out, 19 edges and bus 1 keeps only 1-5
    view = s.graph(0)
    assert view.n_edge == 19 and np.bincount(view.edge_index.ravel(), minlength=14)[0] == 1
    np.testing.assert_array_equal(view.node("pd_mw")[2], s.pd_mw[0][s.network.load_bus_idx == 2].sum())
    net1 = s.state_network(1)
    assert net1.bus_type[1] == 1 and net1.pmax_mw[1] == 0.0  # common practice: a PV bus without generation is PQ
    with pytest.raises(InputError, match=r"islanding: bus 7 \(id 8\) cut off") as exc:
        s.state_network(2)
    assert exc.value.where == f"sample {int(s.sample_id[2])}: branch 13 (id 14)"
    with pytest.raises(InputError, match="expected a sample position from 0 to 499"):
        s.state(500)


def test_damaged_state_columns_are_one_clear_error(with_states, tmp_path):
    folder, br, gen = with_states
    path = folder / "inputs.parquet"
    t = read_table(path)
    one = t.drop_columns(["gen_in_service"])
    with pytest.raises(InputError, match="column branch_in_service is present but gen_in_service is not"):
        state_from_table(one, path, 20, 5)
    with pytest.raises(InputError, match=r"expected 21 flags \(the manifest's element count.*got 20") as exc:
        state_from_table(t, path, 20 + 1, 5)
    assert "sample " in exc.value.where and exc.value.where.endswith("column branch_in_service")
    with pytest.raises(InputError, match="expected a list of true/false flags per sample") as exc:
        bad = t.set_column(t.schema.get_field_index("gen_in_service"), "gen_in_service",
                           pa.array(np.zeros(t.num_rows)))
        state_from_table(bad, path, 20, 5)
    assert exc.value.where.endswith("column gen_in_service")
    rows = [list(r) for r in br]
    rows[3][4] = None
    nulls = t.set_column(t.schema.get_field_index("branch_in_service"), "branch_in_service",
                         pa.array(rows, pa.list_(pa.bool_())))
    with pytest.raises(InputError, match="expected one true/false flag per element in every row"):
        state_from_table(nulls, path, 20, 5)
    write_table(one, path)
    with pytest.raises(InputError, match="present but gen_in_service is not"):
        load_split(folder, references=False)
    with pytest.raises(InputError, match="give both branch_in_service and gen_in_service"):
        inputs_table(np.arange(2), np.zeros((2, 3)), np.zeros((2, 3)), branch_in_service=np.ones((2, 4), bool))
    assert set(STATE_COLUMNS) == {"branch_in_service", "gen_in_service"}


def test_frozen_manifest_unchanged_on_disk(frozen):
    # loading never writes: the manifest's recorded split hash is the one in the file
    m = json.loads((splits_root() / FROZEN / "manifest.json").read_text())
    assert m["split_hash"] == frozen.split_hash


def test_to_pandas_shows_state_columns_only_when_present(with_states, frozen):
    folder, br, gen = with_states
    df = load_split(folder, references=False).to_pandas()
    # ieee14 element ids (PYPOWER case14 order): branch id 1 is 1-2, generator id 2 at bus 2
    assert not df["branch_in_service:1"].iloc[0] and df["branch_in_service:1"].iloc[1]
    assert not df["gen_in_service:2"].iloc[1]
    assert df.filter(like="in_service").shape[1] == 20 + 5
    assert not any("in_service" in c for c in frozen.to_pandas().columns)
