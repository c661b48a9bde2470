"""The one timestamp format geonorm writes: UTC, ISO 8601, to the second."""

from __future__ import annotations

import time

__all__ = ["STAMP_FORMAT", "utc_stamp"]

STAMP_FORMAT = "%Y-%m-%dT%H:%M:%SZ"


def utc_stamp(seconds: float | None = None) -> str:
    """``seconds`` since the epoch (now when None) as e.g. ``2026-03-01T09:30:00Z``."""
    return time.strftime(STAMP_FORMAT, time.gmtime(seconds))
