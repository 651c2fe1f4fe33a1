"""Rebuild or verify a leaderboard folder: scorecards, ranking tables and the page."""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from .. import __version__
from ..errors import InputError, IntegrityError
from ._board import (SUBMISSIONS_DIR, Submission, check_commitments, collect_submissions, read_header,
                     scored, scorecard_is_stale, split_record)
from ._files import read_small_file, write_set
from ._ranking import RankTable, Scored, rank_table
from ._render import OUTPUTS, check_seal, render_outputs
from ._rules import Rules, load_rules
from ._text import clean

__all__ = ["BoardReport", "build_board", "RULES_FILE"]

RULES_FILE = "rules.toml"


@dataclass(frozen=True)
class BoardReport:
    """What a rebuild (or a verification) found and did.

    ``records``: one dict per counted submission (paths and hashes); ``tables``: the rankings;
    ``outputs``: table file name -> its content hash; ``rescored``: scorecards (re)written;
    ``notes``: commitments matched, submissions not counted, scorecards without a submission.
    """

    board: Path
    rules: Rules
    records: tuple[dict, ...]
    tables: tuple[RankTable, ...]
    outputs: dict
    rescored: tuple[str, ...]
    notes: tuple[str, ...]
    verified: bool


def build_board(board: str | Path, *, verify: bool = False, workers: int = 1,
                progress: Callable[[str, int, int], None] | None = None) -> BoardReport:
    """Regenerate everything in a leaderboard folder from its raw files, or verify it.

    Rebuild: rescore each submission whose scorecard is missing or stale, rank, and write the
    new scorecards, ``ranking.md``, ``ranking.csv``, ``ranking.tex`` and ``index.html`` as one
    set (all of them, or, on any failure, none). Verify (``verify=True``): write nothing;
    rescore every submission and raise :class:`IntegrityError` naming the first recorded hash
    or table whose bytes differ. ``progress(step, done, total)`` is called before each
    submission is read (and rescored) and each split verified.
    """
    board = Path(board)
    rules = load_rules(board / RULES_FILE)
    profile_hash = _profile_hash(rules)
    subs = collect_submissions(board)
    if not subs:
        raise InputError("no prediction files under submissions/ and no external.toml listing",
                         where=str(board / "submissions"))
    say = progress or (lambda step, done, total: None)
    cards, rescored, pending = {}, [], {}
    for i, sub in enumerate(subs):
        say(clean(sub.shown_path, 60), i, len(subs))
        sub, card, data = _scorecard(board, sub, rules, profile_hash, verify, workers)
        cards[sub.shown_path] = (sub, card)
        if data is not None:
            pending[sub.scorecard] = data
            rescored.append(sub.scorecard.relative_to(board).as_posix())
    say("ranking", len(subs), len(subs))
    entries, records, notes, splits_used = _group(board, rules, cards)
    _check_one_profile(cards)
    calibration = {n: {e: v for e, v in es.items() if e in _calibration_names(cards, n)}
                   for n, es in entries.items()}
    entries = {n: {e: v for e, v in es.items() if e not in calibration[n]} for n, es in entries.items()}
    if verify:
        from ..splits import verify_split
        for i, split in enumerate(splits_used):  # recompute every hash the manifest records
            say(f"split {split['network']}/{split['split']}", i, len(splits_used))
            verify_split(split["folder"])
    notes = check_commitments(board, rules, splits_used) + notes + _orphans(board, subs)
    notes += [f"rules.toml names network {n}, which has no counted submission"
              for n in (rules.networks or ()) if n not in entries]
    entries = {n: es for n, es in entries.items() if es}
    tables = tuple(t for network in _network_order(entries)
                   for t in _network_tables(network, entries[network], rules, calibration.get(network, {})))
    outputs = render_outputs(board=board, rules=rules, records=records, tables=tables,
                             entries={n: {**entries[n], **calibration.get(n, {})} for n in entries},
                             splits_used=splits_used, notes=notes)
    digests = {name: check_seal(data, name) for name, data in outputs.items()}
    if verify:
        for name, data in outputs.items():
            _verify_output(board / name, name, data)
    else:
        write_set(board, {**pending, **{board / name: data for name, data in outputs.items()}})
    return BoardReport(board, rules, tuple(records), tables, digests, tuple(rescored),
                       tuple(notes), verify)


def _profile_hash(rules: Rules) -> str:
    from ..scoring import get_profile
    return get_profile(rules.profile).hash


def _scorecard(board: Path, sub: Submission, rules: Rules, profile_hash: str, verify: bool,
               workers: int) -> tuple[Submission, dict, bytes | None]:
    """The submission (header read), its scorecard, and the bytes of a fresh scorecard to
    write when the one on disk is missing or stale (None when it can be kept)."""
    from ..scoring import read_scorecard
    card_rel = sub.scorecard.relative_to(board).as_posix()
    if sub.file is None:
        sub, card = _listed_only(board, sub, card_rel, verify)
        return sub, card, None
    sub = read_header(sub)
    card, reason = None, "it is missing"
    if sub.scorecard.exists() and not sub.scorecard.is_file():
        reason = "it is not a regular file"
    elif sub.scorecard.exists():
        try:
            card = read_scorecard(sub.scorecard)
            reason = scorecard_is_stale(card, sub, profile_hash)
        except (IntegrityError, InputError) as exc:
            if verify:
                raise IntegrityError(exc.message, where=card_rel) from None
            reason = f"it cannot be used ({exc.message})"  # a generated file: score again
    if verify:
        if reason is not None:
            raise IntegrityError(f"scorecard of {sub.shown_path} does not match it: {reason}",
                                 where=card_rel)
        fresh = _score(sub, rules, workers).to_dict()
        if fresh["scorecard_hash"] != card["scorecard_hash"]:
            from .._numerics import kernel_note
            note = kernel_note()
            raise IntegrityError(
                f"rescoring {sub.shown_path} gives scorecard hash {fresh['scorecard_hash']}, "
                f"the committed scorecard records {card['scorecard_hash']}" + (f"; {note}" if note else ""),
                where=card_rel)
        return sub, card, None
    if reason is None:
        return sub, card, None
    data = _score(sub, rules, workers).to_bytes()
    return sub, json.loads(data), data  # as read_scorecard would read the written file


def _score(sub: Submission, rules: Rules, workers: int):
    """Score one submission; a user error names the submission it came from."""
    from ..scoring import score
    try:
        return score(sub.file, profile=rules.profile, workers=workers)
    except InputError as exc:
        if exc.where and sub.shown_path in str(exc.where):
            raise
        where = f"{exc.where}: " if exc.where else ""
        raise InputError(f"{where}{exc.message}", where=sub.shown_path) from None


def _listed_only(board: Path, sub: Submission, card_rel: str, verify: bool):
    """A submission listed in external.toml whose file is not here: rank from its scorecard."""
    from ..scoring import read_scorecard
    if verify:
        raise InputError("listed in submissions/external.toml but not found; --verify rescores "
                         "every submission and needs the file", where=sub.shown_path)
    if not sub.scorecard.exists():
        raise InputError("listed in submissions/external.toml but not found, and it has no "
                         f"scorecard ({card_rel}) to rank from", where=sub.shown_path)
    card = read_scorecard(sub.scorecard)
    if card.get("predictions_hash") != sub.listed_hash:
        raise IntegrityError(f"scorecard records predictions_hash {card.get('predictions_hash')}, "
                             f"external.toml lists {sub.listed_hash}", where=card_rel)
    header = {"split": card["split"], "model": card["model"]}
    return Submission(sub.shown_path, None, sub.scorecard, sub.listed_hash, header,
                      sub.listed_hash), card


def _group(board: Path, rules: Rules, cards: dict):
    """network -> entry -> split -> Scored, the hash records, notes and the splits used."""
    entries: dict = {}
    records, notes, cache, owner = [], [], {}, {}
    for shown, (sub, card) in sorted(cards.items()):
        network, split = card["split"]["network"], card["split"]["split"]
        name = card["model"]["name"]
        if (rules.networks is not None and network not in rules.networks) or split not in rules.splits:
            notes.append(f"{shown}: {network}/{split} is not counted by the rules")
            continue
        key = (network, name, split)
        if key in owner:
            raise InputError(f"entry {clean(name, 80)!r} already has a {network}/{split} "
                             f"submission ({owner[key]}); one submission per entry and split",
                             where=shown)
        owner[key] = shown
        try:
            rec = split_record(card["split"]["split_hash"], cache)
        except InputError as exc:
            raise InputError(f"its split {network}/{split} is not among the frozen splits "
                             f"({exc.message})", where=shown) from None
        entries.setdefault(network, {}).setdefault(name, {})[split] = scored(sub, card, board)
        records.append({
            "submission": shown, "network": network, "split": split, "entry": name,
            "predictions_hash": sub.predictions_hash,
            "scorecard": sub.scorecard.relative_to(board).as_posix(),
            "scorecard_hash": card["scorecard_hash"], "split_hash": rec["split_hash"]})
    by_split: dict = {}
    for r in records:
        first = by_split.setdefault((r["network"], r["split"]), r)
        if first["split_hash"] != r["split_hash"]:
            raise InputError(f"scored against split {r['split_hash']}, while {first['submission']} "
                             f"was scored against {first['split_hash']}; entries of one "
                             f"{r['network']}/{r['split']} table must share one split",
                             where=r["submission"])
    return entries, records, notes, sorted(cache.values(), key=lambda s: (s["network"], s["split"]))


def _network_order(entries: dict) -> list[str]:
    from ..network import bundled_names
    order = {n: i for i, n in enumerate(bundled_names())}
    return sorted(entries, key=lambda n: (order.get(n, len(order)), n))


def _network_tables(network: str, entries: dict, rules: Rules, calibration: dict) -> list[RankTable]:
    """The overall table, one table per split, and the calibration rows (ordered like a
    ranking over all splits, but not ranked: they are the reference with known noise)."""
    excluded = {} if rules.allow_extra_data else {
        e: "declares it used more than the training split; rules.toml ranks such entries only with "
           "[entries] allow_extra_data = true"
        for e, s in entries.items() if any(not _training_only(sc.card) for sc in s.values())}
    # the splits of the rules that this network has entries for (test-year exists only where
    # hourly loads ship with the case, test-n1 only where single-outage splits are frozen)
    splits = tuple(s for s in rules.splits if any(s in by_split for by_split in entries.values()))
    tables = [rank_table(network, "all", splits, entries, rules, excluded)]
    for split in splits:
        present = {e: s for e, s in entries.items() if split in s}
        if present:
            tables.append(rank_table(network, split, (split,), present, rules, excluded))
    if calibration:
        tables.append(rank_table(network, CALIBRATION_SCOPE, splits, calibration, rules))
    return tables


CALIBRATION_SCOPE = "calibration"
CALIBRATION_DIR = "calibration"  # submissions/calibration/...: rows of the reference with known noise


def _training_only(card: dict) -> bool:
    return (card.get("model") or {}).get("training_data_only") is True


def _calibration_names(cards: dict, network: str) -> set[str]:
    """Entry names of the calibration submissions (under ``submissions/calibration/``)."""
    prefix = f"{SUBMISSIONS_DIR}/{CALIBRATION_DIR}/"
    return {card["model"]["name"] for shown, (sub, card) in cards.items()
            if shown.startswith(prefix) and card["split"]["network"] == network}


def _check_one_profile(cards: dict) -> None:
    """Scorecards of different profiles never meet in one ranking."""
    seen: dict[str, str] = {}
    for shown, (sub, card) in sorted(cards.items()):
        prof = card.get("profile") or {}
        seen.setdefault(prof.get("hash", ""), shown)
        if len(seen) > 1:
            (h1, f1), (h2, f2) = list(seen.items())[:2]
            def name(f):
                p = cards[f][1].get("profile") or {}
                return f"{clean(p.get('name'), 40)!r} version {clean(p.get('version'), 10)}"
            raise InputError(f"scorecards of two profiles cannot be ranked together: {f1} was scored with "
                             f"profile {name(f1)}, {f2} with profile {name(f2)}; rescore with one profile",
                             where=f2)


def _orphans(board: Path, subs: list[Submission]) -> list[str]:
    known = {s.scorecard for s in subs}
    root = board / "scorecards"
    found = sorted(p for p in root.rglob("*.json") if p not in known) if root.is_dir() else []
    return [f"{p.relative_to(board).as_posix()}: scorecard without a submission (not used)"
            for p in found]


def _verify_output(path: Path, name: str, expected: bytes) -> None:
    try:
        data = read_small_file(path, where=name, expected="a generated table", missing="",
                               max_bytes=1 << 30)
    except InputError as exc:
        raise IntegrityError(exc.message or "table missing; run flowgauge rank to write it",
                             where=name) from None
    check_seal(data, name)
    if data != expected:
        line = _first_difference(data, expected)
        raise IntegrityError(f"bytes differ from the table regenerated from the raw files "
                             f"(first at line {line})", where=name)


def _first_difference(a: bytes, b: bytes) -> int:
    for i, (x, y) in enumerate(zip(a.splitlines(), b.splitlines()), start=1):
        if x != y:
            return i
    return min(len(a.splitlines()), len(b.splitlines())) + 1
