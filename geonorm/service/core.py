"""The service's state and work, apart from HTTP: one ``Service`` per running app.

It holds the resolver (the index loaded once), a cache connection per thread
on ``DIR/cache.sqlite``, the service store (``DIR/service.sqlite``), the job
runner and the per-token rate limits. The routes of ``app.py`` and the review
page call its methods; every answer comes from the library's answer pipeline.
"""

from __future__ import annotations

import contextlib
import hashlib
import hmac
import math
import secrets
import threading
import time
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

from ..batch.answers import resolve_keys
from ..batch.cache import Cache
from ..batch.lookup import answer_json, lookup_keys
from ..clock import utc_stamp
from ..errors import GeonormError
from ..resolve.resolution import Reason, Resolution, Status
from ..resolve.resolver import DEFAULT_ACCEPT, Resolver
from ..review.queue import check_items
from .errors import Invalid, NotFound, RateLimited
from .jobs import JobRunner, valid_job_id
from .store import ServiceStore

__all__ = ["RateLimiter", "Service"]

_SEEN_FLUSH_SECONDS = 10.0
_PAGE = 2000  # keys per step when walking the strings seen, most rows first


class RateLimiter:
    """A token bucket per client: ``rate`` requests a second, bursts of up to ``rate``."""

    def __init__(self, rate: float) -> None:
        self.rate = rate
        self.burst = max(1.0, rate)
        self._buckets: dict[str, tuple[float, float]] = {}
        self._lock = threading.Lock()

    def take(self, who: str) -> float:
        """0 when the request may go on, else the seconds until it may."""
        if self.rate <= 0:
            return 0.0
        now = time.monotonic()
        with self._lock:
            level, then = self._buckets.get(who, (self.burst, now))
            level = min(self.burst, level + (now - then) * self.rate)
            if level >= 1.0:
                self._buckets[who] = (level - 1.0, now)
                return 0.0
            self._buckets[who] = (level, now)
            return (1.0 - level) / self.rate


def _doubt(res: Resolution) -> float:
    """As the review queue weighs it: 1 − confidence; a world region is surely no one country."""
    if res.reason is Reason.WORLD_REGION:
        return 0.1
    return 1.0 - (res.confidence if res.country else 0.0)


def _item(key: str, text: str, rows: int, res: Resolution) -> dict[str, Any]:
    """One doubtful string for the review page."""
    alternatives = [c for c in res.candidates if c.country != res.country][:3]
    return {
        "key": key,
        "text": text,
        "rows": rows,
        "impact": round(rows * _doubt(res), 2),
        "guess": {
            "country": res.country,
            "subdivision": res.subdivision,
            "city": res.city,
            "confidence": round(res.confidence, 4) if res.country else 0.0,
            "status": res.status.value,
        },
        "alternatives": [
            {
                "country": c.country,
                "subdivision": c.subdivision,
                "city": c.city,
                "score": round(c.score, 4),
            }
            for c in alternatives
        ],
    }


class Service:
    """Everything one running service holds. See ``create_app``."""

    def __init__(
        self,
        data_dir: Path,
        *,
        rate: float = 50.0,
        job_workers: int = 1,
        keep_days: int = 30,
        max_upload_mb: int = 2048,
        resolver: Resolver | None = None,
    ) -> None:
        self.data_dir = Path(data_dir).resolve()
        self.cache_path = self.data_dir / "cache.sqlite"
        self.jobs_dir = self.data_dir / "jobs"
        self.keep_days = keep_days
        self.max_upload_bytes = max_upload_mb * 1024 * 1024
        self.store = ServiceStore(self.data_dir / "service.sqlite")
        Cache(self.cache_path).close()  # made, or checked to be a cache, before any request
        self._resolver = resolver
        self.limiter = RateLimiter(rate)
        self.jobs = JobRunner(self.data_dir, self.store, workers=job_workers, keep_days=keep_days)
        self._caches: list[Cache] = []  # connections not in use
        self._generation = 0
        self._lock = threading.Lock()
        self._pepper = secrets.token_bytes(32)  # this process's key for remembering tokens
        self._verified: dict[str, bytes] = {}
        self._seen: dict[str, tuple[str, int]] = {}
        self._flusher: threading.Thread | None = None
        self._stopped = threading.Event()
        self.lookups = 0  # keys asked of /v1/resolve, and how many the cache answered
        self.cache_hits = 0

    # -- life -----------------------------------------------------------------
    def start(self) -> None:
        """Load the index (once) and start the job workers."""
        _ = self.resolver
        self.jobs.start()
        if self._flusher is None:
            self._stopped.clear()
            self._flusher = threading.Thread(target=self._flush_often, name="seen", daemon=True)
            self._flusher.start()

    def _flush_often(self) -> None:
        """Rows seen reach service.sqlite from this thread, never from a request's."""
        while not self._stopped.wait(_SEEN_FLUSH_SECONDS):
            with contextlib.suppress(GeonormError):
                self.flush_seen()

    @property
    def resolver(self) -> Resolver:
        """The one resolver of this process: its index is loaded at start-up, once."""
        if self._resolver is None:
            with self._lock:
                if self._resolver is None:
                    self._resolver = Resolver()
        return self._resolver

    def stop(self) -> None:
        """Stop the job workers and close the cache connections (``start`` may follow)."""
        self._stopped.set()
        if self._flusher is not None:
            self._flusher.join(timeout=30)
            self._flusher = None
        self.flush_seen()
        self.jobs.stop()
        with self._lock:
            caches, self._caches = self._caches, []
            self._generation += 1  # connections in use are closed when they come back
        for cache in caches:
            with contextlib.suppress(Exception):  # at shutdown: nothing left to do
                cache.close()

    @property
    def index_version(self) -> str:
        return str(self.resolver.index.meta.get("index_version", ""))

    @contextlib.contextmanager
    def cache(self) -> Iterator[Cache]:
        """A connection to the cache for one piece of work (kept for the next one)."""
        with self._lock:
            cache = self._caches.pop() if self._caches else None
            generation = self._generation
        if cache is None:
            cache = Cache(self.cache_path)
        try:
            yield cache
        finally:
            with self._lock:
                keep = generation == self._generation
                if keep:
                    self._caches.append(cache)
            if not keep:  # the service stopped meanwhile
                with contextlib.suppress(Exception):
                    cache.close()

    # -- tokens ---------------------------------------------------------------
    def role_of(self, token: str) -> str | None:
        """The role of ``token``: "resolve", "review" or "admin"; None if unknown or revoked.

        A token checked once is remembered as a keyed digest, so later requests cost
        one constant-time comparison and one lookup that sees a revocation at once.
        """
        if not token or len(token) > 300:
            return None
        remembered = self.remembered_role(token)
        if remembered is None or isinstance(remembered, str):
            return remembered
        checked = self.store.check_token(token)
        if checked is None:
            return None
        ident, role, _ = checked
        self._verified[ident] = self._digest(token)
        return role

    def _digest(self, token: str) -> bytes:
        return hmac.new(self._pepper, token.encode("utf-8", "replace"), hashlib.sha256).digest()

    def remembered_role(self, token: str) -> str | bool | None:
        """The role of a token checked before (None once revoked), or False when it must be
        checked (a slow salted hash): the fast path, cheap enough for the event loop."""
        known = self._verified.get(token[3:15])
        if known is None or not hmac.compare_digest(known, self._digest(token)):
            return False
        return self.store.token_role(token[3:15])

    def client_of(self, token: str) -> str:
        """Who a (checked) token belongs to, for rate limits: its public id."""
        return token[3:15]

    def check_rate(self, client: str) -> None:
        wait = self.limiter.take(client)
        if wait > 0:
            raise RateLimited(
                f"more than {self.limiter.rate:g} requests a second with this token",
                hint="wait for the Retry-After seconds, or send more texts per request",
                retry_after=max(1, math.ceil(wait)),
            )

    # -- resolving --------------------------------------------------------------
    def resolve(self, texts: Sequence[str], accept: float = DEFAULT_ACCEPT) -> list[dict[str, Any]]:
        """``geonorm lookup --json --cache DIR/cache.sqlite`` of ``texts``, as objects."""
        resolver = self.resolver
        keys = [resolver.key(t) for t in texts]
        with self.cache() as cache:
            results, answers = lookup_keys(texts, keys, resolver, cache, accept)
        with self._lock:
            self.lookups += len(answers.results)
            self.cache_hits += answers.from_cache
            seen = self._seen
            for text, key in zip(texts, keys, strict=True):
                first, rows = seen.get(key, (text, 0))
                seen[key] = (first, rows + 1)
        return [answer_json(t, r) for t, r in results]

    def flush_seen(self) -> None:
        """Store the rows seen per key since the last flush (kept in memory between)."""
        with self._lock:
            pending, self._seen = self._seen, {}
        if pending:
            self.store.add_seen(pending)

    # -- review -----------------------------------------------------------------
    def review_items(self, job_id: str | None = None, limit: int = 50) -> list[dict[str, Any]]:
        """The doubtful strings of the whole cache (or of one job) without a decision,
        most impact (rows × doubt) first."""
        limit = max(0, min(int(limit), 1000))
        if job_id is not None:
            if not valid_job_id(job_id) or self.store.job(job_id) is None:
                raise NotFound(
                    f"there is no job {job_id!r}",
                    hint="list the jobs you made with their ids; finished jobs are kept "
                    f"{self.keep_days} days",
                )
            return self._doubtful(self.store.job_keys(job_id), limit)
        self.flush_seen()
        best: list[dict[str, Any]] = []
        offset = 0
        while True:
            page = self.store.seen_page(offset, _PAGE)
            if not page:
                break
            best = sorted(
                [*best, *self._doubtful(page, limit)],
                key=lambda d: (-d["impact"], -d["rows"], d["text"]),
            )[:limit]
            offset += len(page)
            # Impact is at most the rows: no later (smaller) string can enter the list.
            if len(best) >= limit and page[-1][2] <= best[-1]["impact"]:
                break
        return best

    def _doubtful(self, seen: list[tuple[str, str, int]], limit: int) -> list[dict[str, Any]]:
        if not seen or limit == 0:
            return []
        counts = {key: rows for key, _, rows in seen}
        with self.cache() as cache:
            answers = resolve_keys(counts, resolver=self.resolver, cache=cache, full=True)
            decided = cache.overrides(counts)
        items = [
            _item(key, text, rows, answers.results[key])
            for key, text, rows in seen
            if key not in decided
            and answers.results[key].status in (Status.REVIEW, Status.UNMATCHED)
        ]
        items.sort(key=lambda d: (-d["impact"], -d["rows"], d["text"]))
        return items[:limit]

    def decide(self, items: list[dict[str, Any]], source: str = "service") -> int:
        """Check decisions as ``review apply`` does and store them all, or none."""
        decisions, problems = check_items(items, self.resolver)
        if problems:
            raise Invalid(
                f"{len(problems)} of {len(items)} decision(s) have problems; none was stored",
                hint="fix the items listed under problems and send them all again",
                problems=[{"index": p.line, "reason": p.message} for p in problems],
            )
        now = utc_stamp()
        by_key = {d["key"]: {**d, "decided_at": now, "source": source} for d in decisions}
        if by_key:
            with self.cache() as cache:
                cache.put_overrides(list(by_key.values()))
        return len(by_key)
