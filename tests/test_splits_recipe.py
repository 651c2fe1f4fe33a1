"""Recipes: a split written as a recipe rebuilds to the same identity hash; a recipe whose
expected hashes differ stops the rebuild with exit 3 naming the first differing sample and file;
bad recipe files are exit 2 naming file and field; the identity hash leaves out exactly what is
measured; the frozen splits keep their split_hash and match their committed recipes."""

import json
import shutil
from pathlib import Path

import pytest

from flowgauge.cli import main
from flowgauge.errors import InputError, IntegrityError
from flowgauge.splits import (build_from_recipe, build_split, check_split_against_recipe, read_recipe,
                              recipe_from_split, recipes_root, verify_split)
from flowgauge.splits._builder import partial_dir
from flowgauge.splits._manifest import compute_identity_hash, compute_split_hash

REPO = Path(__file__).resolve().parents[1]
SEED = 77


@pytest.fixture(scope="module")
def root(tmp_path_factory):
    return tmp_path_factory.mktemp("recipes")


@pytest.fixture(scope="module")
def train(root):
    """A small ieee14 training split and its recipe, written with the command."""
    out = root / "built" / "ieee14" / "train"
    m = build_split("ieee14", "train", samples=12, seed=SEED, out=out, chunk=4, notes="recipe test")
    recipe = root / "recipes" / "ieee14" / "train.json"
    assert main(["splits", "recipe", str(out), "--out", str(recipe), "--chunk", "3"]) == 0
    return out, m, recipe


def _rebuild(recipe, out, *extra):
    return main(["splits", "rebuild", str(recipe), "--out", str(out), "--quiet", *extra])


def _edit(recipe: Path, dest: Path, change) -> Path:
    doc = json.loads(recipe.read_text())
    change(doc)
    dest.write_text(json.dumps(doc, indent=1))
    return dest


def _flip(hex_digits: str) -> str:
    return ("1" if hex_digits[0] == "0" else "0") + hex_digits[1:]


def _set_digest(doc, key, sample, change=_flip):
    sd = doc["expected"]["sample_digests"]
    h, per = sd["digest_hex"], sd["per_line"]
    line, pos = divmod(sample, per)
    text = sd[key][line]
    sd[key][line] = text[:pos * h] + change(text[pos * h:(pos + 1) * h]) + text[(pos + 1) * h:]


def test_the_recipe_records_what_rebuilds_the_split(train):
    out, m, recipe = train
    r = read_recipe(recipe)
    assert (r["network"], r["split"], r["seed"], r["samples"]) == (m["network"], "train", SEED, 12)
    assert r["build"] == {"chunk": 3, "max_attempts": 100}
    assert r["design"] == m["design"] and r["solver"] == m["solver"] and r["notes"] == "recipe test"
    assert r["expected"]["identity_hash"] == m["identity_hash"]
    assert r["expected"]["inputs_hash"] == m["files"]["inputs"]["hash"]
    assert r["built_with"]["split_hash"] == m["split_hash"]
    assert "solve_seconds" not in r["expected"]["reference_columns"]
    assert recipe.read_bytes().endswith(b"}\n") and json.loads(recipe.read_text()) == r  # canonical, indented


def test_two_builds_from_the_recipe_give_the_same_identity(train, root, capsys):
    out, m, recipe = train
    first, second = root / "rb1" / "ieee14" / "train", root / "rb2" / "ieee14" / "train"
    assert _rebuild(recipe, first) == 0
    assert "12 samples reproduce the recipe" in capsys.readouterr().out
    assert _rebuild(recipe, second, "--workers", "2") == 0
    a, b = (json.loads((f / "manifest.json").read_text()) for f in (first, second))
    assert a["identity_hash"] == b["identity_hash"] == m["identity_hash"]
    assert a["files"]["inputs"]["hash"] == b["files"]["inputs"]["hash"] == m["files"]["inputs"]["hash"]
    # what differs between the builds is only what is measured
    for doc in (a, b):
        assert {k: v for k, v in doc.items() if k not in ("reference_solve_seconds", "split_hash", "files")} == \
            {k: v for k, v in m.items() if k not in ("reference_solve_seconds", "split_hash", "files")}
    assert verify_split(first).identity_hash == m["identity_hash"]


@pytest.mark.parametrize("key,sample,file,workers", [("references", 5, "references.parquet", 1),
                                                     ("inputs", 7, "inputs.parquet", 1),
                                                     ("references", 5, "references.parquet", 2)])
def test_a_differing_sample_stops_the_rebuild_naming_it(train, tmp_path, capsys, key, sample, file, workers):
    out, m, recipe = train
    bad = _edit(recipe, tmp_path / "bad.json", lambda d: (_set_digest(d, key, sample), _set_digest(d, key, 10)))
    dest = tmp_path / "ieee14" / "train"
    capsys.readouterr()
    # with 2 workers chunks finish in any order: the error still names the split's first differing sample
    assert _rebuild(bad, dest, "--workers", str(workers)) == 3
    err = capsys.readouterr().err
    assert err.startswith(f"Error: sample {sample} ({file}): the rebuilt {key} of sample {sample} differ "
                          "from the recipe's"), err
    # a differing reference (same inputs) points at the solver's arithmetic on another CPU model
    assert ("can differ in their last digits on another CPU model" in err) == (key == "references"), err
    assert not dest.exists()
    if workers > 1:
        return
    # chunks before the differing one are kept: a rerun with a correct recipe resumes from them
    chunks = sorted(p.name for p in (partial_dir(dest) / "chunks").glob("*.npz"))
    assert chunks == [f"samples-{s:07d}-{s + 3:07d}.npz" for s in range(0, 3 * (sample // 3), 3)]
    progress = []
    build_from_recipe(recipe, out=dest, progress=progress.append)
    assert progress[0].resumed == 3 * (sample // 3)


def test_a_differing_expected_hash_keeps_the_split_out_of_place(train, tmp_path, capsys):
    out, m, recipe = train
    bad = _edit(recipe, tmp_path / "bad.json",
                lambda d: d["expected"].update(identity_hash=_flip(d["expected"]["identity_hash"])))
    dest = tmp_path / "ieee14" / "train"
    assert _rebuild(bad, dest) == 3
    err = capsys.readouterr().err
    assert f"{bad}: /expected/identity_hash: recipe" in err and "was not put in place" in err
    assert not dest.exists() and (partial_dir(dest) / "final" / "inputs.parquet").exists()


def test_a_differing_rejection_count_is_named(train, tmp_path, capsys):
    out, m, recipe = train
    bad = _edit(recipe, tmp_path / "bad.json", lambda d: d["expected"].update(draws=d["expected"]["draws"] + 1))
    assert _rebuild(bad, tmp_path / "ieee14" / "train") == 3
    assert f"{bad}: /expected/draws: recipe {m['draws'] + 1}, rebuilt {m['draws']}" in capsys.readouterr().err


def test_a_differing_design_is_refused_before_any_solve(train, tmp_path, capsys):
    out, m, recipe = train
    bad = _edit(recipe, tmp_path / "bad.json", lambda d: d["design"]["parameters"].update(step_sigma=0.5))
    dest = tmp_path / "ieee14" / "train"
    assert _rebuild(bad, dest) == 3
    err = capsys.readouterr().err
    assert f"{bad}: /design/parameters/step_sigma: this build would differ from the recipe before any sample " \
           "is solved: recipe 0.5, this flowgauge 0.35" in err
    assert not partial_dir(dest).exists()


def test_another_network_is_refused(train, tmp_path, capsys):
    out, m, recipe = train
    bad = _edit(recipe, tmp_path / "bad.json",
                lambda d: d["network"].update(content_hash=_flip(d["network"]["content_hash"])))
    assert _rebuild(bad, tmp_path / "x") == 3
    assert "bundled network ieee14: network content hash" in capsys.readouterr().err


@pytest.mark.parametrize("change,where,message", [
    (lambda d: d.pop("seed"), "/", "'seed' is a required property"),
    (lambda d: d.update(seed="7"), "/seed", "'7' is not of type 'integer'"),
    (lambda d: d["build"].update(chunk=0), "/build/chunk", "0 is less than the minimum of 1"),
    (lambda d: d.update(split="validation"), "/split", "expected one of train, test-id"),
    (lambda d: d["expected"]["sample_digests"]["inputs"].__setitem__(0, d["expected"]["sample_digests"]["inputs"][0]
                                                                     + "ab" * 8), "/expected/sample_digests/inputs",
     "holds digests of 13 samples, the recipe has 12"),
    (lambda d: d["expected"]["sample_digests"]["references"].__setitem__(0, "abc"),
     "/expected/sample_digests/references/0", "expected 1024 hex digits"),
])
def test_bad_recipe_files_name_file_and_field(train, tmp_path, capsys, change, where, message):
    bad = _edit(train[2], tmp_path / "bad.json", change)
    assert _rebuild(bad, tmp_path / "x") == 2
    err = capsys.readouterr().err
    assert err.startswith(f"Error: {bad}: {where}: ") and message in err, err


def test_not_json_and_missing_recipes(tmp_path, capsys):
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": "flowgauge-split-recipe",')
    assert _rebuild(bad, tmp_path / "x") == 2
    assert f"Error: {bad}: not valid JSON" in capsys.readouterr().err
    assert _rebuild("ieee14/no-such-split", tmp_path / "x") == 2
    assert "no recipe ieee14/no-such-split" in capsys.readouterr().err


def test_a_test_split_is_rebuilt_beside_its_training_split(train, root, tmp_path, capsys):
    out, m, recipe = train
    test_out = out.parent / "test-id"
    tm = build_split("ieee14", "test-id", samples=4, seed=SEED, out=test_out, chunk=2)
    assert tm["train"]["identity_hash"] == m["identity_hash"]
    r = recipe_from_split(test_out)
    assert r["train"] == {"identity_hash": m["identity_hash"]}
    # the design names its training split by identity in the recipe, as in the identity view
    rebuilt = build_from_recipe(r, out=tmp_path / "ieee14" / "test-id", train=out)
    assert rebuilt["identity_hash"] == tm["identity_hash"]
    with pytest.raises(InputError, match="build that first"):
        build_from_recipe(r, out=tmp_path / "alone" / "ieee14" / "test-id")
    other = root / "other" / "ieee14" / "train"
    build_split("ieee14", "train", samples=2, seed=SEED + 1, out=other, chunk=2)
    with pytest.raises(IntegrityError, match="the training split differs from the one the recipe was written"):
        build_from_recipe(r, out=tmp_path / "wrong" / "ieee14" / "test-id", train=other)


def test_the_identity_leaves_out_exactly_what_is_measured(train):
    m = train[1]
    same = json.loads(json.dumps(m))
    same["reference_solve_seconds"]["median"] *= 3
    same["notes"], same["flowgauge_version"] = "other words", "9.9.9"
    refs = same["files"]["references"]
    for col in ("solve_seconds", "max_p_mismatch_mw", "max_q_mismatch_mvar", "max_limit_violation"):
        refs["columns"][col] = "0" * 64
    refs["hash"] = refs["solution_hash"] = "1" * 64
    assert compute_identity_hash(same) == m["identity_hash"]
    for change in (lambda d: d.update(seed=d["seed"] + 1), lambda d: d["rejected"].update(x=1),
                   lambda d: d["files"]["references"]["columns"].update(pg_mw="2" * 64),
                   lambda d: d["files"]["inputs"].update(hash="3" * 64),
                   lambda d: d["coverage"].update(regimes=0)):
        other = json.loads(json.dumps(m))
        change(other)
        assert compute_identity_hash(other) != m["identity_hash"]


def test_frozen_splits_keep_their_split_hash_and_gain_an_identity():
    for name in ("train", "test-id", "test-ood", "test-edge", "train-local"):
        folder = REPO / "splits" / "ieee14" / name
        doc = json.loads((folder / "manifest.json").read_text())
        assert "identity_hash" not in doc  # written before recipes, not rewritten
        assert compute_split_hash(doc) == doc["split_hash"]
        r = verify_split(folder)
        assert r.split_hash == doc["split_hash"]
        assert (r.identity_hash is None) == ("train" in doc)  # a test split's needs its train's


@pytest.mark.parametrize("network", ["ieee14", "demo"])
def test_committed_recipes_match_the_frozen_splits(network):
    folder = recipes_root() / network
    names = sorted(p.stem for p in folder.glob("*.json"))
    # every frozen split of the network has its recipe (and no recipe lacks its split)
    frozen = sorted(p.name for p in (REPO / "splits" / network).iterdir() if (p / "manifest.json").exists())
    assert names == frozen
    assert {"test-edge", "test-id", "test-ood", "train", "train-local", "test-n1", "train-n1"} <= set(names)
    for name in names:
        ident = check_split_against_recipe(folder / f"{name}.json", REPO / "splits" / network / name)
        assert ident == read_recipe(folder / f"{name}.json")["expected"]["identity_hash"]


def test_a_tampered_frozen_split_fails_its_recipe(tmp_path):
    copy = tmp_path / "ieee14" / "test-edge"
    shutil.copytree(REPO / "splits" / "ieee14" / "test-edge", copy)
    shutil.copytree(REPO / "splits" / "ieee14" / "train", tmp_path / "ieee14" / "train")
    doc = read_recipe(recipes_root() / "ieee14" / "test-edge.json")
    _set_digest(doc, "references", 42)
    with pytest.raises(IntegrityError, match=r"sample 42 \(references.parquet\)"):
        check_split_against_recipe(doc, copy)


def test_verify_checks_a_split_against_its_recipe(tmp_path, capsys):
    folder = str(REPO / "splits" / "ieee14" / "test-edge")
    assert main(["splits", "verify", folder, "--recipe", "ieee14/test-edge"]) == 0
    assert "ok  matches the recipe" in capsys.readouterr().out
    doc = json.loads((recipes_root() / "ieee14" / "test-edge.json").read_text())
    _set_digest(doc, "inputs", 3)
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(doc))
    assert main(["splits", "verify", folder, "--recipe", str(bad)]) == 3
    assert "Error: sample 3 (inputs.parquet): the checked inputs of sample 3 differ" in capsys.readouterr().err
    assert main(["splits", "verify", "--recipe", str(bad)]) == 2
    assert "--recipe: checks one split against a recipe: give one PATH" in capsys.readouterr().err
