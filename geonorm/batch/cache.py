"""SQLite cache of resolutions: one row per distinct normalised string.

The table ``resolution`` holds the whole answer: the geo fields as columns and
the candidates and per-country evidence as JSON, with the resolver, index and
calibration version that produced it, and timestamps. A row made by another
version is a miss, so a new index never serves stale answers. WAL mode lets a
reader and a writer share the file; writes are batched in one transaction per
chunk, so an interrupted run keeps what it committed.
"""

from __future__ import annotations

import functools
import json
import os
import sqlite3
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any, ParamSpec, TypeVar

import sqlite_utils

from ..clock import utc_stamp
from ..errors import CacheError
from ..paths import data_dir
from ..resolve.resolution import Candidate, Reason, Resolution, Status
from .remote_answer import RemoteAnswer, answer_from_json, answer_to_json

__all__ = ["CACHE_SCHEMA", "Cache", "default_cache_path"]

CACHE_SCHEMA = 2  # layout of the resolution table; another value means: rebuild that table
# Reasons whose answers the file prior may re-rank: their evidence is read back.
_DETAILED = {Reason.AMBIGUOUS.value, Reason.CITY_BY_SIZE.value, Reason.SEVERAL_COUNTRIES.value}
_STATUS = {s.value: s for s in Status}
_REASON = {r.value: r for r in Reason}


_T = TypeVar("_T")
_P = ParamSpec("_P")
_BATCH = 900  # keys per "IN (...)" query: below SQLite's limit on bound parameters


def _guarded(method: Callable[_P, _T]) -> Callable[_P, _T]:
    """Let every SQLite error of a cache method leave as a ``CacheError`` with a hint."""

    @functools.wraps(method)
    def wrapper(*args: _P.args, **kwargs: _P.kwargs) -> _T:
        try:
            return method(*args, **kwargs)
        except sqlite3.Error as exc:
            path = getattr(args[0], "path", "?")
            raise CacheError(
                f"the cache at {path} failed: {exc}",
                hint="check the disk has space and the file is writable; if the file is "
                "damaged, delete it or pass another `cache` file",
            ) from exc

    return wrapper


def default_cache_path() -> Path:
    env = os.environ.get("GEONORM_CACHE")
    return Path(env) if env else data_dir() / "cache.sqlite"


class Cache:
    """The answers, decisions, queue, remote answers and run records of one SQLite file.

    Use it as a context manager (``with Cache(path) as cache:``) to close it at the
    end; every SQLite error leaves its methods as a ``CacheError``.
    """

    def __init__(self, path: Path | str | None = None) -> None:
        self.path = Path(path) if path else default_cache_path()
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            conn = sqlite3.connect(self.path, timeout=60, check_same_thread=False)
            self.db = sqlite_utils.Database(conn)
            self.db.execute("PRAGMA journal_mode=WAL")
            self.db.execute("PRAGMA synchronous=NORMAL")
            if self.db.execute("PRAGMA user_version").fetchone()[0] != CACHE_SCHEMA:
                with conn:
                    if "resolution" in self.db.table_names():
                        self.db.table("resolution").drop()
                    conn.execute(f"PRAGMA user_version = {CACHE_SCHEMA}")
            tables = self.db.table_names()
            if "override" not in tables:
                self.db.table("override").create(
                    {
                        "key": str,
                        "text": str,
                        "country": str,
                        "subdivision": str,
                        "city": str,
                        "lat": float,
                        "lon": float,
                        "geonameid": int,
                        "not_a_place": int,
                        "note": str,
                        "decided_at": str,
                        "source": str,
                    },
                    pk="key",
                )
            if "queue" not in tables:
                self.db.table("queue").create(
                    {"key": str, "text": str, "exported_at": str, "file": str}, pk="key"
                )
            if "remote_answer" not in tables:
                self.db.table("remote_answer").create(
                    {"provider": str, "key": str, "status": str, "answer": str, "asked_at": str},
                    pk=("provider", "key"),
                )
            if "remote_usage" not in tables:
                self.db.table("remote_usage").create(
                    {"provider": str, "requests": int}, pk="provider"
                )
            if "run" not in tables:
                self.db.table("run").create(
                    {"output": str, "input": str, "column": str, "at": str}, pk="output"
                )
            if "resolution" not in self.db.table_names():
                self.db.table("resolution").create(
                    {
                        "key": str,
                        "version": str,
                        "status": str,
                        "reason": str,
                        "country": str,
                        "subdivision": str,
                        "city": str,
                        "lat": float,
                        "lon": float,
                        "geonameid": int,
                        "confidence": float,
                        "score": float,
                        "detail": str,
                        "created": str,
                        "updated": str,
                    },
                    pk="key",
                )
        except (sqlite3.DatabaseError, OSError) as exc:
            raise CacheError(
                f"cannot open the cache at {self.path} ({exc})",
                hint="pass another `cache` file, or delete the damaged file",
            ) from exc

    def __enter__(self) -> Cache:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _in_batches(
        self, sql: str, keys: Sequence[str], before: Sequence[Any] = ()
    ) -> Iterator[Any]:
        """Rows of ``sql`` (whose ``{marks}`` stands for the key list) over ``keys`` in batches."""
        for i in range(0, len(keys), _BATCH):
            batch = keys[i : i + _BATCH]
            yield from self.db.execute(
                sql.format(marks=",".join("?" * len(batch))), [*before, *batch]
            ).fetchall()

    @_guarded
    def get_many(
        self, keys: Iterable[str], version: str, full: bool = False
    ) -> dict[str, Resolution]:
        """Look up many keys in a few queries (not one query per key).

        Candidates and evidence are read back for the answers a file prior may
        re-rank, or for all with ``full``.
        """
        keys = list(keys)
        out: dict[str, Resolution] = {}
        columns = (
            "SELECT key, status, reason, country, subdivision, city, lat, lon, geonameid, "
            "confidence, "
            "score, detail FROM resolution WHERE version = ?"
        )
        if len(keys) > 5000 and len(keys) * 4 >= self.count():
            # Asking for a good part of the table: one sequential scan beats many IN queries.
            wanted = set(keys)
            batches: Iterable[list] = [
                [row for row in self.db.execute(columns, [version]) if row[0] in wanted]
            ]
        else:
            batches = [list(self._in_batches(f"{columns} AND key IN ({{marks}})", keys, [version]))]
        for rows in batches:
            for key, status, reason, country, sub, city, lat, lon, gid, conf, score, detail in rows:
                res = Resolution(
                    _STATUS[status], _REASON[reason], country, sub, city, lat, lon, gid, conf, score
                )
                if full or reason in _DETAILED:
                    extra = json.loads(detail)
                    res.candidates = [Candidate(**c) for c in extra["candidates"]]
                    res.evidence = extra["evidence"]
                elif country:
                    res.evidence = {country: 1.0}
                out[key] = res
        return out

    @_guarded
    def put_many(self, items: Mapping[str, Resolution], version: str) -> None:
        """Store answers in one transaction."""
        now = utc_stamp()
        rows = [
            (
                k,
                version,
                r.status.value,
                r.reason.value,
                r.country,
                r.subdivision,
                r.city,
                r.lat,
                r.lon,
                r.geonameid,
                r.confidence,
                r.score,
                json.dumps(
                    {"candidates": [c.__dict__ for c in r.candidates], "evidence": r.evidence},
                    ensure_ascii=False,
                ),
                now,
                now,
            )
            for k, r in items.items()
        ]
        if not rows:
            return
        try:
            with self.db.conn:
                self.db.conn.executemany(
                    "INSERT INTO resolution (key, version, status, reason, country, "
                    "subdivision, city, lat, lon, "
                    "geonameid, confidence, score, detail, created, updated) "
                    "VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?) ON CONFLICT(key) DO UPDATE SET "
                    "version=excluded.version, status=excluded.status, reason=excluded.reason, "
                    "country=excluded.country, subdivision=excluded.subdivision, "
                    "city=excluded.city, "
                    "lat=excluded.lat, lon=excluded.lon, geonameid=excluded.geonameid, "
                    "confidence=excluded.confidence, score=excluded.score, detail=excluded.detail, "
                    "updated=excluded.updated",
                    rows,
                )
        except sqlite3.DatabaseError as exc:
            raise CacheError(
                f"cannot write to the cache at {self.path} ({exc})",
                hint="check the disk has space and the file is writable",
            ) from exc

    # -- human decisions ------------------------------------------------------
    @_guarded
    def overrides(self, keys: Iterable[str] | None = None) -> dict[str, dict]:
        """Stored decisions, by key (all of them, or those of ``keys``)."""
        cols = (
            "key, text, country, subdivision, city, lat, lon, geonameid, not_a_place, note, "
            "decided_at, "
            "source"
        )
        if keys is None:
            rows = self.db.execute(
                f"SELECT {cols} FROM override ORDER BY decided_at, key"
            ).fetchall()
        else:
            rows = list(
                self._in_batches(
                    f"SELECT {cols} FROM override WHERE key IN ({{marks}})", list(keys)
                )
            )
        names = [c.strip() for c in cols.split(",")]
        return {r[0]: dict(zip(names, r, strict=False)) for r in rows}

    @_guarded
    def put_overrides(self, decisions: list[dict]) -> None:
        """Store decisions in one transaction."""
        with self.db.conn:
            self.db.table("override").upsert_all(decisions, pk="key")

    @_guarded
    def delete_override(self, key: str) -> bool:
        with self.db.conn:
            cur = self.db.conn.execute("DELETE FROM override WHERE key = ?", (key,))
        return cur.rowcount > 0

    @_guarded
    def put_queue(self, entries: list[dict]) -> None:
        with self.db.conn:
            self.db.table("queue").upsert_all(entries, pk="key")

    @_guarded
    def queued(self, keys: Iterable[str]) -> set[str]:
        return {
            r[0]
            for r in self._in_batches("SELECT key FROM queue WHERE key IN ({marks})", list(keys))
        }

    # -- remote answers -------------------------------------------------------
    @_guarded
    def remote_answers(self, provider: str, keys: Iterable[str]) -> dict[str, RemoteAnswer]:
        """Cached answers of ``provider`` for ``keys``: results, no-results, permanent errors."""
        rows = self._in_batches(
            "SELECT key, status, answer FROM remote_answer WHERE provider = ? AND key IN ({marks})",
            list(keys),
            [provider],
        )
        return {key: answer_from_json(status, answer) for key, status, answer in rows}

    @_guarded
    def put_remote_answer(
        self, provider: str, key: str, answer: RemoteAnswer, requests: int
    ) -> None:
        """One answer and the requests it cost, in one transaction (an interrupted run keeps it)."""
        now = utc_stamp()
        with self.db.conn:
            self.db.conn.execute(
                "INSERT OR REPLACE INTO remote_answer (provider, key, status, answer, asked_at) "
                "VALUES (?,?,?,?,?)",
                (provider, key, answer.status, answer_to_json(answer), now),
            )
            self._add_usage(provider, requests)

    @_guarded
    def add_remote_used(self, provider: str, requests: int) -> None:
        if requests:
            with self.db.conn:
                self._add_usage(provider, requests)

    def _add_usage(self, provider: str, requests: int) -> None:
        self.db.conn.execute(
            "INSERT INTO remote_usage (provider, requests) VALUES (?, ?) ON CONFLICT(provider) "
            "DO UPDATE SET requests = requests + excluded.requests",
            (provider, requests),
        )

    @_guarded
    def remote_used(self, provider: str) -> int:
        row = self.db.execute(
            "SELECT requests FROM remote_usage WHERE provider = ?", (provider,)
        ).fetchone()
        return int(row[0]) if row else 0

    @_guarded
    def record_run(self, output: str, input: str, column: str, remote: str = "") -> None:
        """Remember which column of which input made ``output``, and the remote service used."""
        now = utc_stamp()
        with self.db.conn:
            self.db.table("run").upsert(
                {"output": output, "input": input, "column": column, "remote": remote, "at": now},
                pk="output",
                alter=True,
            )

    @_guarded
    def run_info(self, output: str) -> dict[str, str] | None:
        """What ``record_run`` stored for ``output``: its input, column and remote service."""
        table = self.db.table("run")
        row = table.rows_where("output = ?", [output], limit=1)
        found = next(iter(row), None)
        if found is None:
            return None
        return {k: str(found.get(k) or "") for k in ("input", "column", "remote")}

    @_guarded
    def count(self) -> int:
        return self.db.table("resolution").count

    def close(self) -> None:
        self.db.conn.close()
