"""One exception tree for everything a user can cause. The CLI prints
``Error: <message>`` and the hint, and exits with code 1."""

from __future__ import annotations

__all__ = ["CacheError", "GeonormError", "IndexError_", "InputError"]


class GeonormError(Exception):
    """Base class. ``hint`` says what to do next."""

    def __init__(self, message: str, *, hint: str = "") -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return self.message


class InputError(GeonormError):
    """A bad input file, a missing column, a bad option value."""


class IndexError_(GeonormError):
    """The place index is missing, stale or unreadable."""


class CacheError(GeonormError):
    """The resolution cache cannot be opened or written."""
