"""Progress reporting without a user interface.

The library tells a callback what it is doing; the CLI renders the events as
messages and a progress bar, a service could log them, and the default does
nothing. Events are small values, so a callback can be a plain function.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

__all__ = ["Progress", "ProgressEvent", "no_progress", "note", "start"]


@dataclass(frozen=True)
class ProgressEvent:
    """``note``: a message; ``start``: a task of ``total`` steps begins;
    ``advance``: ``done`` more steps of the current task are finished."""

    kind: Literal["note", "start", "advance"]
    text: str = ""
    total: int = 0
    done: int = 0


Progress = Callable[[ProgressEvent], None]


def no_progress(event: ProgressEvent) -> None:
    """The default callback: ignore every event."""


def note(progress: Progress, text: str) -> None:
    progress(ProgressEvent("note", text))


def start(progress: Progress, text: str, total: int) -> Callable[[int], None]:
    """Announce a task and return a function that reports ``n`` more steps done."""
    progress(ProgressEvent("start", text, total=total))
    return lambda n: progress(ProgressEvent("advance", text, total=total, done=n))
