"""The answer pipeline: one function turns distinct strings into final answers.

Every entry point — ``clean``, ``resolve_series``, ``lookup``, ``score``,
``review export`` — calls ``resolve_keys``, so they never disagree. The order:

1. **cache** — answers stored by earlier runs of the same resolver, index and
   calibration version;
2. **cascade** — the resolver, on an engine, for the keys the cache lacks; each
   finished chunk is stored at once, so an interrupted run resumes;
3. **decisions** — a person's decision from the review queue replaces the answer;
4. **file prior** — the countries of the file's confident rows re-rank its
   ambiguous names;
5. **remote** — optionally, a remote geocoder for the doubtful rest (or its
   cached answers only, when replaying a run);
6. **settle** — the accept threshold sets every status, here and nowhere else.

``batch/columnar.py`` runs the same steps for a whole file's distinct values
as columns (``answer_table``).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..progress import Progress, no_progress, start
from ..resolve.prior import rerank
from ..resolve.resolution import Reason, Resolution, Status, settle
from ..resolve.resolver import Resolver
from .engines import Chunk, Engine, LocalEngine
from .options import RemoteOptions

if TYPE_CHECKING:  # a lookup without a cache never imports it
    from .cache import Cache

__all__ = ["Answers", "count_keys", "needs_remote", "resolve_keys"]

# Reasons no remote service can improve: a continent names no one country, a
# text naming places in several countries is several places, a person decided.
_NOT_FOR_REMOTE = frozenset({Reason.WORLD_REGION, Reason.SEVERAL_COUNTRIES, Reason.REVIEWED})


@dataclass
class Answers:
    """Final answers by key, and where they came from."""

    results: dict[str, Resolution]
    from_cache: int = 0
    resolved: int = 0
    decided: int = 0
    remote: dict[str, Any] = field(default_factory=dict)


def count_keys(values: Iterable[object] | Mapping[Any, int], resolver: Resolver) -> Counter[str]:
    """Rows per cache key, from raw values (or a value → row-count mapping)."""
    counts: Counter[str] = Counter()
    pairs = values.items() if isinstance(values, Mapping) else ((v, 1) for v in values)
    for value, n in pairs:
        counts[resolver.key(value)] += n
    return counts


def needs_remote(res: Resolution, accept: float) -> bool:
    """Whether a remote service may settle this answer: no place, or one below ``accept``."""
    return (
        res.status is not Status.NOT_A_PLACE
        and res.reason not in _NOT_FOR_REMOTE
        and (not res.country or res.confidence < accept)
    )


def resolve_keys(
    counts: Mapping[str, int],
    *,
    resolver: Resolver,
    cache: Cache | None = None,
    accept: float | None = None,
    engine: Engine | None = None,
    remote: RemoteOptions | str | None = None,
    full: bool = False,
    progress: Progress = no_progress,
) -> Answers:
    """Final answers for the keys of ``counts`` (key → rows in the file).

    ``remote`` is a remote stage to run, or the name of a service whose cached
    answers are merged without sending anything (to replay a run). ``full``
    reads every cached answer's candidates back (the review queue shows them).
    """
    accept = resolver.accept if accept is None else accept
    version = resolver.version
    found = cache.get_many(counts, version, full=full) if cache is not None else {}
    misses = sorted(k for k in counts if k not in found)
    fresh: dict[str, Resolution] = {}
    if misses:
        advance = start(progress, "resolving", len(misses))

        def take(chunk: Chunk) -> None:
            if cache is not None:  # one transaction per chunk: a killed run keeps it
                cache.put_rows(chunk.rows, version)
            fresh.update(chunk.answers)
            advance(len(chunk))

        (engine or LocalEngine()).resolve(resolver, misses, take)
    results = {**found, **fresh}
    decided = _apply_decisions(results, cache)
    rerank(results, counts, resolver.calibration, accept)
    answers = Answers(results, len(found), len(fresh), decided)
    if remote is not None:
        answers.remote = _remote_stage(remote, answers, counts, cache, resolver, accept)
    for res in results.values():
        settle(res, accept)
    return answers


def _apply_decisions(results: dict[str, Resolution], cache: Cache | None) -> int:
    """People's decisions from the review queue win over every stage."""
    if cache is None:
        return 0
    decisions = cache.overrides(results)
    for key, decision in decisions.items():
        results[key] = Resolution.from_override(decision)
    return len(decisions)


def _remote_stage(
    remote: RemoteOptions | str,
    answers: Answers,
    counts: Mapping[str, int],
    cache: Cache | None,
    resolver: Resolver,
    accept: float,
) -> dict[str, Any]:
    """Send the doubtful rest to a remote geocoder (or replay its cached answers) and merge."""
    from .remote import load_adapter, merge, run_remote

    if cache is None:
        from .cache import Cache

        cache = Cache()
    results = answers.results
    wanted = [(k, n) for k, n in counts.items() if k and needs_remote(results[k], accept)]
    summary: dict[str, Any]
    if isinstance(remote, str):
        provider, summary = remote, {"provider": remote, "eligible": len(wanted), "replayed": True}
    else:
        adapter = (
            load_adapter(str(remote.adapter))
            if isinstance(remote.adapter, (str, Path))
            else remote.adapter
        )
        provider = adapter.name
        stats = run_remote(
            adapter,
            wanted,
            cache,
            budget=remote.budget,
            budget_total=remote.budget_total,
            refresh=remote.refresh,
            dry_run=remote.dry_run,
            transport=remote.transport,
        )
        summary = _remote_summary(stats, len(wanted))
        if remote.dry_run:
            return summary
    changed = 0
    for key, answer in cache.remote_answers(provider, [k for k, _ in wanted]).items():
        merged = merge(results[key], answer, provider, resolver.index)
        if merged is not results[key]:
            changed += 1
            results[key] = merged
    summary["strings_changed"] = changed
    return summary


def _remote_summary(stats: Any, eligible: int) -> dict[str, Any]:
    return {
        "provider": stats.provider,
        "eligible": eligible,
        "already_answered": stats.from_cache,
        "planned": len(stats.planned),
        "requests": stats.requests,
        "answered": stats.answered,
        "with_results": stats.results,
        "no_result": stats.no_result,
        "errors": stats.errors,
        "rejected_results": stats.rejected,
        "retries": stats.retries,
        "breaker_open": stats.breaker_open,
        "over_budget": stats.stopped_by_budget,
        "messages": stats.messages,
        "top_planned": [{"text": k, "rows": n} for k, n in stats.planned[:20]],
    }
