"""Text written by submitters (model names, authors, descriptions, links, file names), made safe
for each place it reaches: one line without control characters, capped in length, and escaped
for Markdown, LaTeX, CSV, a URL attribute and the terminal.

HTML escaping is left to Jinja2's autoescaping of the page template; every function here
returns plain text (never markup).
"""

from __future__ import annotations

import re
import unicodedata
from urllib.parse import quote

__all__ = ["clean", "cap", "md", "md_code", "tex", "csv_text", "safe_link", "terminal",
           "short_hashes", "NAME_CAP", "TEXT_CAP", "CONSOLE_CAP"]

NAME_CAP = 200      # a model name, an author, a file path as shown in tables
TEXT_CAP = 5000     # a description
CONSOLE_CAP = 120   # any one piece of submitter text echoed on the terminal
ELLIPSIS = "\u2026"

# Characters that change how text around them is read: bidirectional overrides and isolates
# (they reorder what a reader sees), and the Unicode line and paragraph separators.
_INVISIBLE = {0x200E, 0x200F, *range(0x202A, 0x202F), *range(0x2066, 0x206A)}
_LINE_BREAKS = {0x2028, 0x2029, 0x0085}


def _keep(ch: str) -> str:
    code = ord(ch)
    if code in _LINE_BREAKS or ch in "\t\n\r\v\f":
        return " "
    if code in _INVISIBLE:
        return ""
    category = unicodedata.category(ch)
    if category == "Cc":        # C0 and C1 control characters, NUL, DEL
        return ""
    if category == "Cs":        # a lone surrogate cannot be encoded as UTF-8
        return "\ufffd"
    return ch


def cap(text: str, limit: int) -> str:
    """``text`` cut to at most ``limit`` characters, an ellipsis marking the cut."""
    return text if len(text) <= limit else text[: max(limit - 1, 0)] + ELLIPSIS


def clean(value, limit: int = NAME_CAP) -> str:
    """One line of printable text: control characters and bidirectional overrides removed,
    line breaks and tabs turned into spaces, lone surrogates replaced, at most ``limit``
    characters."""
    text = "" if value is None else str(value)
    return cap("".join(_keep(ch) for ch in text), limit)


_MD_SPECIAL = re.compile(r"([\\`*_\[\]|<>&#~$!])")


def md(value, limit: int = NAME_CAP) -> str:
    """Plain text for a Markdown table cell or list item: every character that Markdown (or
    the HTML it may contain) would read as syntax is backslash-escaped."""
    return _MD_SPECIAL.sub(r"\\\1", clean(value, limit))


def md_code(value, limit: int = NAME_CAP) -> str:
    """A Markdown code span holding ``value`` literally (e.g. a file path): the fence is one
    backtick longer than the longest run inside, and a pipe is escaped so that it cannot end a
    table cell."""
    text = clean(value, limit).replace("|", "\\|")
    longest = max((len(m) for m in re.findall(r"`+", text)), default=0)
    fence = "`" * (longest + 1)
    pad = " " if text.startswith("`") or text.endswith("`") or not text.strip() else ""
    return f"{fence}{pad}{text}{pad}{fence}"


_TEX = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
        "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
        "^": r"\textasciicircum{}", "|": r"\textbar{}", "<": r"\textless{}",
        ">": r"\textgreater{}", '"': r"\textquotedbl{}"}


def tex(value, limit: int = NAME_CAP) -> str:
    """Text for LaTeX, in the body or in a ``%`` comment: one line (a newline would end the
    comment and start live TeX) with every special character escaped."""
    return "".join(_TEX.get(c, c) for c in clean(value, limit))


_FORMULA_START = ("=", "+", "-", "@")


def csv_text(value, limit: int = NAME_CAP) -> str:
    """A text cell for CSV: one line, and a leading ``= + - @`` (read as a formula by
    spreadsheets) preceded by an apostrophe."""
    text = clean(value, limit)
    return "'" + text if text.startswith(_FORMULA_START) else text


# A link must be http(s) and hold no character that could end an attribute or a tag, start an
# escape or hide in a URL: no quotes, spaces, angle brackets, backslashes or backticks.
LINK_PATTERN = r"^https?://[^\s\"'<>\\`]+$"
_LINK = re.compile(LINK_PATTERN)


def safe_link(value) -> str:
    """The model's link when it is a plain http(s) URL, percent-encoded so that only URL
    characters remain; empty otherwise (the page then shows no link)."""
    if not isinstance(value, str) or len(value) > 2000 or clean(value, 2000) != value:
        return ""
    if not _LINK.match(value):
        return ""
    return quote(value, safe="/:?#[]@!$&()*+,;=%-._~")


def terminal(value, limit: int = CONSOLE_CAP) -> str:
    """Text for the terminal through rich: one line, capped, rich markup escaped."""
    from rich.markup import escape
    return escape(clean(value, limit))


_HASH = re.compile(r"\b([0-9a-f]{12})[0-9a-f]{52}\b")


def short_hashes(text: str) -> str:
    """Every 64-digit SHA-256 in ``text`` cut to its first 12 digits (for the screen)."""
    return _HASH.sub(r"\1", text)
