"""What a remote geocoder answered for one text, and its JSON form in the cache.

Kept apart from ``remote.py`` so that the cache can store and read answers
without importing the remote stage (which imports the cache).
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field

from ..errors import CacheError

__all__ = ["RemoteAnswer", "RemoteHit", "answer_from_json", "answer_to_json"]


@dataclass(frozen=True)
class RemoteHit:
    country: str  # as the service wrote it (alpha-2, alpha-3 or an English name)
    lat: float | None = None
    lon: float | None = None
    city: str = ""
    subdivision: str = ""
    score: float | None = None


@dataclass
class RemoteAnswer:
    status: str  # ok | no_result | error (permanent) | transient (never cached)
    hits: list[RemoteHit] = field(default_factory=list)
    error: str = ""
    rejected: int = 0  # results dropped as malformed


def answer_to_json(answer: RemoteAnswer) -> str:
    """The answer without its status (the cache keeps that in a column of its own)."""
    return json.dumps(
        {
            "hits": [asdict(h) for h in answer.hits],
            "error": answer.error,
            "rejected": answer.rejected,
        },
        ensure_ascii=False,
    )


def answer_from_json(status: str, text: str) -> RemoteAnswer:
    """An answer read back from the cache; a damaged entry raises ``CacheError``."""
    try:
        data = json.loads(text)
        return RemoteAnswer(
            status,
            [RemoteHit(**h) for h in data["hits"]],
            str(data.get("error", "")),
            int(data.get("rejected", 0)),
        )
    except (TypeError, ValueError, KeyError, AttributeError) as exc:
        raise CacheError(
            f"a cached remote answer is damaged ({type(exc).__name__}: {exc})",
            hint="ask the service again with `refresh`, or delete the cache file",
        ) from exc
