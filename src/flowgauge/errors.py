"""The project's error types.

A user's mistake raises :class:`InputError` (the CLI prints one line and exits 2); a
recorded hash that does not match the content raises :class:`IntegrityError` (exit 3).
Anything else reaching the CLI is a bug in flowgauge (exit 1).
"""

from __future__ import annotations

__all__ = ["FlowgaugeError", "InputError", "IntegrityError"]


class FlowgaugeError(Exception):
    """Base class: ``where`` names the file, field, JSON pointer, column or sample."""

    exit_code = 1

    def __init__(self, message: str, *, where: str | None = None):
        super().__init__(message)
        self.message = message
        self.where = where

    def __str__(self) -> str:
        return f"{self.where}: {self.message}" if self.where else self.message


class InputError(FlowgaugeError, ValueError):
    """Bad input from the user: a file, an option, a network, an array shape."""

    exit_code = 2


class IntegrityError(FlowgaugeError):
    """A recorded content hash does not match the content."""

    exit_code = 3
