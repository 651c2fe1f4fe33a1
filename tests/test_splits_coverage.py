"""Coverage of a split in `splits show` and on the page: distinct binding-limit regimes, the
discovery curve, the share of samples with each limit family binding, the share whose regime
occurs in train, the samples per kind. Expected values are counted in the tests themselves with
plain Python over the references (sets, loops), never with flowgauge's coverage function."""

import json
import re
import shutil
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from flowgauge.cli import main
from flowgauge.splits import build_split, load_split, summarize_split

ROOT = Path(__file__).resolve().parents[1]

# Limit family of each label suffix ("<bus|gen|branch>:<id>:<limit>"), the grouping of the trade
# (common practice): bus voltage, generator active and reactive output, branch thermal rating,
# branch angle difference.
FAMILY = {"vmin": "voltage", "vmax": "voltage", "pmin": "active_power", "pmax": "active_power",
          "qmin": "reactive_power", "qmax": "reactive_power", "rate_from": "thermal",
          "rate_to": "thermal", "angmin": "angle", "angmax": "angle"}


def _by_hand(split, train_signatures=None):
    """Regimes, new regimes per 100 samples, family shares and the seen-in-train share,
    counted with sets and loops."""
    r = split.references
    sig = [str(x) for x in r.signature]
    seen, discovery = set(), []
    for start in range(0, len(sig), 100):
        new = set(sig[start:start + 100]) - seen
        discovery.append(len(new))
        seen |= new
    shares = {f: sum(any(FAMILY[b.split(":")[2]] == f for b in labels) for labels in r.binding) / len(sig)
              for f in set(FAMILY.values())}
    out = {"regimes": len(set(sig)), "discovery": tuple(discovery), "shares": shares}
    if train_signatures is not None:
        out["seen"] = sum(x in set(train_signatures) for x in sig) / len(sig)
    return out


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """A 110-sample train-local split (two blocks of the discovery curve, the last one 10
    samples) and a 6-sample test-edge split built against it, both recording coverage."""
    root = tmp_path_factory.mktemp("cov")
    train = root / "ieee14" / "train-local"
    build_split("ieee14", "train-local", samples=110, seed=3, out=train, chunk=55)
    edge = root / "ieee14" / "test-edge"
    build_split("ieee14", "test-edge", samples=6, seed=4, out=edge, chunk=6, train=train)
    return root, train, edge


def test_summary_reads_the_manifests_coverage(built):
    root, train, edge = built
    s, t = summarize_split(train), load_split(train)
    hand = _by_hand(t)
    assert s.coverage_from == "manifest"
    assert (s.regimes, s.discovery) == (hand["regimes"], hand["discovery"])
    assert len(s.discovery) == 2 and s.last_block_samples == 10  # 110 = 100 + 10
    assert s.still_rising == (hand["discovery"][-1] > 0)
    for fam, share in hand["shares"].items():
        assert s.family_shares[fam] == pytest.approx(share, abs=1e-9), fam
    assert s.regime_seen_in_train is None and s.kinds is not None  # a training split
    e = summarize_split(edge)
    hand_e = _by_hand(load_split(edge), t.references.signature)
    assert e.regime_seen_in_train == pytest.approx(hand_e["seen"], abs=1e-9)
    assert sum(e.kinds.values()) == 6


def _strip(folder: Path, *, seen_column: bool) -> None:
    """Make a split look like one written before coverage: no "coverage" in the manifest and,
    optionally, no regime_seen_in_train column in the references."""
    m = json.loads((folder / "manifest.json").read_text())
    m.pop("coverage")
    (folder / "manifest.json").write_text(json.dumps(m))
    if not seen_column:
        path = folder / "references.parquet"
        pq.write_table(pq.read_table(path).drop_columns(["regime_seen_in_train"]), path)


def test_summary_computes_coverage_when_the_manifest_has_none(built, tmp_path):
    root, train, edge = built
    old = tmp_path / "ieee14"
    shutil.copytree(edge, old / "test-edge")
    shutil.copytree(train, old / "train")  # the training split it was built against, as sibling
    _strip(old / "test-edge", seen_column=False)
    s = summarize_split(old / "test-edge")
    hand = _by_hand(load_split(old / "test-edge"), load_split(train).references.signature)
    assert s.coverage_from == "references"
    assert (s.regimes, s.discovery) == (hand["regimes"], hand["discovery"])
    for fam, share in hand["shares"].items():
        assert s.family_shares[fam] == pytest.approx(share, abs=1e-9), fam
    # the share seen in train, from the sibling train folder's signatures
    assert s.regime_seen_in_train == pytest.approx(hand["seen"], abs=1e-9)
    # a sibling that is not the training split the manifest names: no share rather than a wrong one
    shutil.rmtree(old / "train")
    build_split("ieee14", "train-local", samples=3, seed=99, out=old / "train", chunk=3)
    assert summarize_split(old / "test-edge").regime_seen_in_train is None


def test_show_prints_coverage_within_80_columns(built, monkeypatch, capsys):
    root, train, edge = built
    monkeypatch.setenv("FLOWGAUGE_SPLITS", str(root))
    assert main(["splits", "show", "ieee14"]) == 0
    out = capsys.readouterr().out
    assert max(len(line) for line in out.splitlines()) <= 80, out
    assert "Coverage of ieee14: share of samples with each limit family binding" in out
    hand = _by_hand(load_split(train))
    last = hand["discovery"][-1]
    flat = "rising" if last else "flat"
    pct = {f: f"{100 * v:.0f}%" for f, v in hand["shares"].items()}
    row = (rf"^train-local\s+{hand['regimes']}\s+{last}/10 {flat}\s+{pct['voltage']}\s+{pct['active_power']}\s+"
           rf"{pct['reactive_power']}\s+{pct['thermal']}\s+{pct['angle']}\s+-\s*$")
    assert re.search(row, out, re.M), out
    hand_e = _by_hand(load_split(edge), load_split(train).references.signature)
    assert re.search(rf"^test-edge\s+{hand_e['regimes']}\s+{hand_e['regimes']}/6 rising\s.*"
                     rf"\s{100 * hand_e['seen']:.0f}%\s*$", out, re.M), out
    kinds = sorted(set(load_split(edge).kind))
    assert kinds == ["edge"]  # the design's name when it has one kind of draw
    assert "test-edge kinds: edge 6" in out


def _board(path: Path) -> Path:
    board = path / "board"
    (board / "submissions").mkdir(parents=True)
    rules = (ROOT / "tests" / "test_leaderboard_profile2.py").read_text().split('RULES = """')[1].split('"""')[0]
    (board / "rules.toml").write_text(rules)
    from flowgauge.baselines import write_baseline
    write_baseline("linear", load_split("ieee14", "test-id"), board / "submissions" / "linear.json",
                   train=load_split("ieee14", "train"))
    return board


def _coverage_figure(html: str) -> str:
    start = html.index('<figure class="plot" id="network-ieee14-coverage">')
    return html[start:html.index("</figure>", start)]


def test_page_shows_a_deterministic_coverage_plot(tmp_path):
    board = _board(tmp_path)
    assert main(["rank", str(board)]) == 0
    fig = _coverage_figure((board / "index.html").read_text())
    svg = fig[fig.index("<svg"):fig.index("</svg>") + 6]
    ids = re.findall(r'\bid="([^"]+)"', svg)
    assert ids and all(i.startswith("network-ieee14-coverage-") for i in ids)
    assert len(ids) == len(set(ids))
    for ref in re.findall(r'(?:href="#|url\(#)([^")]+)', svg):
        assert ref in ids  # every reference points at an id of this plot
    assert "test-id" in svg and "reactive power" in svg and "distinct regimes" in svg
    # same inputs, same bytes: a second rank (scorecards kept) draws the plot afresh
    first = (board / "index.html").read_bytes()
    assert main(["rank", str(board)]) == 0
    assert (board / "index.html").read_bytes() == first


def test_plot_of_a_split_with_withheld_references_uses_the_manifests_discovery_curve(built, tmp_path):
    from flowgauge.leaderboard._plots import coverage_svg
    from flowgauge.leaderboard._render import _coverage_data
    root, train, edge = built
    folder = tmp_path / "train-local"
    shutil.copytree(train, folder)
    (folder / "references.parquet").unlink()  # as a published split: inputs and manifest only
    data = _coverage_data("ieee14", [{"network": "ieee14", "split": "train-local", "folder": folder},
                                     {"network": "ieee30", "split": "train", "folder": tmp_path / "absent"}])
    hand = _by_hand(load_split(train))
    # cumulative new regimes at the end of each block of 100 samples, the last block ending at 110
    assert data == [{"name": "train-local", "samples": [100, 110],
                     "regimes": [hand["discovery"][0], hand["regimes"]],
                     "family_shares": pytest.approx(hand["shares"], abs=1e-9)}]
    assert coverage_svg("ieee14", [{"name": "x", "samples": [], "regimes": [], "family_shares": None}]) is None
