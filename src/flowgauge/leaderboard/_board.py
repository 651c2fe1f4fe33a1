"""A leaderboard folder: its submissions, their scorecards (rescored when missing or stale),
the frozen splits they were scored against, and the published reference commitments."""

from __future__ import annotations

import json
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__
from ..errors import InputError, IntegrityError
from ._files import inside, read_small_file
from ._ranking import Scored
from ._rules import Rules
from ._text import clean

__all__ = ["Submission", "collect_submissions", "SUBMISSIONS_DIR", "SCORECARDS_DIR",
           "EXTERNAL_FILE", "PREDICTION_SUFFIXES", "scorecard_is_stale", "split_record",
           "check_commitments"]

SUBMISSIONS_DIR = "submissions"
SCORECARDS_DIR = "scorecards"
EXTERNAL_FILE = "external.toml"
PREDICTION_SUFFIXES = (".json", ".parquet")


@dataclass(frozen=True)
class Submission:
    """One predictions file of the board.

    ``shown_path``: the path the tables record (relative to the board folder, or as listed in
    ``external.toml``); ``file``: where it is read (None for a listed file not present here);
    ``listed_hash``: the content hash written in ``external.toml`` (None for committed files).
    """

    shown_path: str
    file: Path | None
    scorecard: Path
    listed_hash: str | None = None
    header: dict = field(default_factory=dict, compare=False)
    predictions_hash: str = ""


def collect_submissions(board: Path) -> list[Submission]:
    """The committed prediction files under ``submissions/`` (sorted by path) and the files
    listed in ``submissions/external.toml``; header and content hash are not read yet."""
    root = board / SUBMISSIONS_DIR
    if not root.is_dir():
        raise InputError("no submissions/ folder here; expected a leaderboard folder",
                         where=str(board))
    inside(board, root, where=SUBMISSIONS_DIR)
    subs = []
    for path in sorted(root.rglob("*")):
        if path.suffix in PREDICTION_SUFFIXES and not path.name.startswith(".") and (
                path.is_file() or path.is_symlink()):
            rel = path.relative_to(root)
            shown = (Path(SUBMISSIONS_DIR) / rel).as_posix()
            inside(board, path, where=shown)  # a link to a file elsewhere is not ranked
            subs.append(Submission(
                shown_path=shown, file=path,
                scorecard=board / SCORECARDS_DIR / rel.with_suffix(".json")))
    subs += _external(board, root / EXTERNAL_FILE)
    names = [s.scorecard for s in subs]
    for s in subs:
        card_rel = s.scorecard.relative_to(board).as_posix()
        if names.count(s.scorecard) > 1:
            raise InputError(f"two submissions would share the scorecard {card_rel}; rename one",
                             where=s.shown_path)
        inside(board, s.scorecard, where=card_rel)  # read from, and written to, the board only
    return subs


def _external(board: Path, listing: Path) -> list[Submission]:
    """Submissions too large for the repository, listed by path and content hash:

        [[submission]]
        path = "/data/entries/ieee300-test-id.parquet"   # absolute, or relative to the board
        predictions_hash = "<64 hex digits>"
    """
    if not (listing.exists() or listing.is_symlink()):
        return []
    where = listing.relative_to(board).as_posix()
    inside(board, listing, where=where)
    data = read_small_file(listing, where=where, expected="a TOML listing of submissions",
                           missing="no such file")
    try:
        doc = tomllib.loads(data.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid TOML: {clean(exc, 300)}", where=where) from None
    items = doc.get("submission", [])
    if not isinstance(items, list) or set(doc) - {"submission"}:
        raise InputError("expected only [[submission]] tables", where=where)
    out = []
    for i, item in enumerate(items):
        at = f"{where}: submission[{i}]"
        if not isinstance(item, dict):
            raise InputError("expected a [[submission]] table", where=at)
        path, digest = item.get("path"), item.get("predictions_hash")
        if not isinstance(path, str) or Path(path).suffix not in PREDICTION_SUFFIXES:
            raise InputError(f"path must name a {' or '.join(PREDICTION_SUFFIXES)} file", where=at)
        if not (isinstance(digest, str) and len(digest) == 64
                and all(c in "0123456789abcdef" for c in digest)):
            raise InputError("predictions_hash must be 64 lowercase hex digits", where=at)
        if clean(path, 4096) != path or "\x00" in path:
            raise InputError("path must be one line of printable characters", where=at)
        file = Path(path) if Path(path).is_absolute() else board / path
        out.append(Submission(
            shown_path=path, file=file if file.exists() else None,
            scorecard=board / SCORECARDS_DIR / "external" / (Path(path).stem + ".json"),
            listed_hash=digest))
    return out


def read_header(sub: Submission) -> Submission:
    """The submission with its header and content hash read from the file."""
    from ..submission import load_predictions
    preds = load_predictions(sub.file)
    header = _get(preds, "header")
    digest = _get(preds, "content_hash")
    if sub.listed_hash is not None and digest != sub.listed_hash:
        raise IntegrityError(f"content hash {digest} differs from the predictions_hash "
                             f"{sub.listed_hash} listed in {SUBMISSIONS_DIR}/{EXTERNAL_FILE}",
                             where=sub.shown_path)
    return Submission(sub.shown_path, sub.file, sub.scorecard, sub.listed_hash, header, digest)


def _get(obj, name):
    return obj[name] if isinstance(obj, dict) else getattr(obj, name)


def scorecard_is_stale(card: dict, sub: Submission, profile_hash: str) -> str | None:
    """Why a scorecard no longer describes its submission, or None when it still does."""
    checks = (
        ("predictions_hash", card.get("predictions_hash"), sub.predictions_hash),
        ("split_hash", (card.get("split") or {}).get("split_hash"),
         (sub.header.get("split") or {}).get("split_hash")),
        ("profile hash", (card.get("profile") or {}).get("hash"), profile_hash),
        ("flowgauge_version", card.get("flowgauge_version"), __version__),
    )
    for name, recorded, current in checks:
        if recorded != current:
            return f"its {name} {recorded} differs from the current {current}"
    return None


def split_record(split_hash: str, cache: dict) -> dict:
    """The frozen split a scorecard names: folder, manifest and references hash."""
    if split_hash not in cache:
        from ..splits import find_split
        folder = Path(find_split(split_hash))
        manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
        cache[split_hash] = {
            "folder": folder, "network": manifest["network"]["name"], "split": manifest["split"],
            "split_hash": split_hash,
            "references_hash": manifest["files"]["references"]["hash"],
            "references_present": (folder / manifest["files"]["references"]["path"]).exists(),
        }
    return cache[split_hash]


def check_commitments(board: Path, rules: Rules, splits_used: list[dict]) -> list[str]:
    """Compare the references each used split holds with the published commitments listed in
    the rules (``[published] splits``: folders written by ``flowgauge splits publish``).

    The used split is verified first (its references file hashes to what its manifest records),
    then its references hash is compared with the published manifest's, matched by network and
    split name; a mismatch is an :class:`IntegrityError`. Returns one note per match.
    """
    notes = []
    for rel in rules.published:
        folder = board / rel
        path = folder / "manifest.json" if folder.is_dir() else folder
        try:
            published = json.loads(path.read_text(encoding="utf-8"))
            key = (published["network"]["name"], published["split"])
            committed = published["files"]["references"]["hash"]
        except FileNotFoundError:
            raise InputError("published split listed in the rules not found; expected a folder "
                             "with manifest.json", where=rel) from None
        except (ValueError, KeyError, TypeError):
            raise InputError("not a split manifest (expected network.name, split and "
                             "files.references.hash)", where=path.as_posix()) from None
        used = [s for s in splits_used if (s["network"], s["split"]) == key]
        for s in used:
            from ..splits import verify_split
            verify_split(s["folder"])  # the references file really holds what its manifest says
            if s["references_hash"] != committed:
                raise IntegrityError(
                    f"the references of {key[0]}/{key[1]} used for scoring (hash "
                    f"{s['references_hash']}) differ from the published commitment {committed}",
                    where=rel)
            notes.append(f"{key[0]}/{key[1]}: the references used match the commitment "
                         f"published in {rel} ({committed})")
    return notes


def scored(sub: Submission, card: dict, board: Path) -> Scored:
    return Scored(where=sub.scorecard.relative_to(board).as_posix(), card=card)
