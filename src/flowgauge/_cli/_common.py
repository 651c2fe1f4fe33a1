"""Small pieces shared by the command modules: consoles and JSON output."""

from __future__ import annotations

import json
import sys
from typing import Any

from rich.console import Console

from .._io import canonical_json

__all__ = ["console", "err_console", "echo_json"]

console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)


def echo_json(obj: Any) -> None:
    """Print ``obj`` as indented canonical JSON on stdout (for ``--json`` options)."""
    sys.stdout.write(canonical_json(obj, indent=1).decode("utf-8"))
    sys.stdout.flush()
