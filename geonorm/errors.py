"""One exception tree for everything a user can cause.

Every error the library raises on purpose is a ``GeonormError`` with a
``message`` (what went wrong, naming the file, line, column or option) and a
``hint`` (what to do next). The CLI prints ``Error: <message>`` and
``Hint: <hint>`` and exits with code 1, without a traceback. Errors of the
libraries underneath (sqlite3, httpx, tomllib) are translated where they are
caught, with ``raise ... from exc``, so the original stays in ``__cause__``.

::

    GeonormError            base class; raised directly for bad option combinations
    ├── InputError          a bad input file, a missing column, a bad option value
    ├── PlaceIndexError     the place index is missing, stale, built by another
    │                       version, or unreadable (``IndexError_`` is its old name)
    ├── CacheError          the resolution cache cannot be opened, read or written
    └── RemoteError         a bad remote adapter file (unreadable, not TOML, an
                            unknown or mistyped key, a bad URL or limit, an unset
                            key variable), an adapter name that is not installed,
                            or a request the adapter cannot build

A remote service that misbehaves at run time (timeouts, 429, 5xx, malformed
JSON or results) raises nothing: those answers are retried, rejected or
counted, and the run finishes offline when the circuit breaker opens.
"""

from __future__ import annotations

__all__ = [
    "CacheError",
    "GeonormError",
    "IndexError_",
    "InputError",
    "PlaceIndexError",
    "RemoteError",
]


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


class PlaceIndexError(GeonormError):
    """The place index is missing, stale or unreadable."""


IndexError_ = PlaceIndexError  # the earlier name, kept so existing code keeps working


class CacheError(GeonormError):
    """The resolution cache cannot be opened, read or written."""


class RemoteError(GeonormError):
    """A bad adapter file or an unusable remote configuration."""
