"""Answers for a list of texts, in order, as ``geonorm lookup`` and the service give them.

``lookup_texts`` runs the answer pipeline over the texts' keys (each counted
once, as the command line passes them) with every candidate read back, and
``answer_json`` is the one JSON form of an answer: ``geonorm lookup --json``
and the service's ``/v1/resolve`` both write it, so they never differ.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from ..resolve.resolution import Resolution
from ..resolve.resolver import Resolver
from .answers import Answers, resolve_keys

if TYPE_CHECKING:
    from .cache import Cache

__all__ = ["answer_json", "lookup_keys", "lookup_texts"]


def answer_json(text: str, res: Resolution) -> dict[str, Any]:
    """The JSON form of one answer: the text, then the answer's fields but the internal
    ones (``Resolution.to_dict`` less ``evidence`` and ``score``, written out field by
    field: ``dataclasses.asdict`` would cost most of a warm request)."""
    return {
        "text": text,
        "status": res.status.value,
        "reason": res.reason.value,
        "country": res.country,
        "subdivision": res.subdivision,
        "city": res.city,
        "lat": res.lat,
        "lon": res.lon,
        "geonameid": res.geonameid,
        "confidence": res.confidence,
        "candidates": [
            {
                "country": c.country,
                "subdivision": c.subdivision,
                "city": c.city,
                "lat": c.lat,
                "lon": c.lon,
                "score": c.score,
            }
            for c in res.candidates
        ],
        "source": res.source,
    }


def lookup_texts(
    texts: Sequence[str],
    *,
    resolver: Resolver,
    cache: Cache | None = None,
    accept: float | None = None,
) -> tuple[list[tuple[str, Resolution]], Answers]:
    """Each text with its final answer, in order, and the pipeline's ``Answers``."""
    return lookup_keys(texts, [resolver.key(t) for t in texts], resolver, cache, accept)


def lookup_keys(
    texts: Sequence[str],
    keys: Sequence[str],
    resolver: Resolver,
    cache: Cache | None = None,
    accept: float | None = None,
) -> tuple[list[tuple[str, Resolution]], Answers]:
    """``lookup_texts`` for texts whose keys (``resolver.key``) are known already."""
    answers = resolve_keys(
        dict.fromkeys(keys, 1), resolver=resolver, cache=cache, accept=accept, full=True
    )
    return [(t, answers.results[k]) for t, k in zip(texts, keys, strict=True)], answers
