"""Ranking rules, ranking tables (Markdown, CSV, LaTeX) and the static leaderboard page.

``build_board(folder)`` regenerates a leaderboard folder from its raw files (rescoring where a
scorecard is missing or stale); ``build_board(folder, verify=True)`` checks every recorded hash
and the bytes of every table.
"""

from __future__ import annotations

from ._build import RULES_FILE, BoardReport, build_board
from ._ranking import RankTable, Scored, Standing, rank_table
from ._render import CAUTION, OUTPUTS, check_seal
from ._rules import METRICS, RankKey, Rules, load_rules, parse_rules, rules_schema
from ._ties import competition_ranks, paired_bootstrap_interval

__all__ = [
    "build_board", "BoardReport", "RULES_FILE", "OUTPUTS", "CAUTION", "check_seal",
    "load_rules", "parse_rules", "rules_schema", "Rules", "RankKey", "METRICS",
    "rank_table", "RankTable", "Standing", "Scored",
    "competition_ranks", "paired_bootstrap_interval",
]
