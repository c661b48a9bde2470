"""SQLite cache of resolutions: one row per distinct normalised string.

The table ``resolution`` holds the whole answer: the geo fields as columns and
the candidates and per-country evidence as JSON, with the resolver, index and
calibration version that produced it, and timestamps. A row made by another
version is a miss, so a new index never serves stale answers. WAL mode lets a
reader and a writer share the file; writes are batched in one transaction per
chunk, so an interrupted run keeps what it committed.
"""

from __future__ import annotations

import json
import os
import sqlite3
import time
from collections.abc import Iterable, Mapping
from pathlib import Path

import sqlite_utils

from ..errors import CacheError
from ..paths import data_dir
from ..resolve.resolution import Candidate, Reason, Resolution, Status

__all__ = ["CACHE_SCHEMA", "Cache", "default_cache_path"]

CACHE_SCHEMA = 2  # layout of the resolution table; another value means: rebuild that table
# Reasons whose answers the file prior may re-rank: their evidence is read back.
_DETAILED = {Reason.AMBIGUOUS.value, Reason.CITY_BY_SIZE.value, Reason.SEVERAL_COUNTRIES.value}
_STATUS = {s.value: s for s in Status}
_REASON = {r.value: r for r in Reason}


def default_cache_path() -> Path:
    env = os.environ.get("GEONORM_CACHE")
    return Path(env) if env else data_dir() / "cache.sqlite"


class Cache:
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
                hint="pass another file with --cache PATH, or delete the damaged file",
            ) from exc

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
            "SELECT key, status, reason, country, subdivision, city, lat, lon, geonameid, confidence, "
            "score, detail FROM resolution WHERE version = ?"
        )
        if len(keys) > 5000 and len(keys) * 4 >= self.count():
            # Asking for a good part of the table: one sequential scan beats many IN queries.
            wanted = set(keys)
            batches: Iterable[list] = [
                [row for row in self.db.execute(columns, [version]) if row[0] in wanted]
            ]
        else:
            batches = (
                self.db.execute(
                    f"{columns} AND key IN ({','.join('?' * len(keys[i : i + 900]))})",
                    [version, *keys[i : i + 900]],
                ).fetchall()
                for i in range(0, len(keys), 900)
            )
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

    def put_many(self, items: Mapping[str, Resolution], version: str) -> None:
        """Store answers in one transaction."""
        now = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
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
                    "INSERT INTO resolution (key, version, status, reason, country, subdivision, city, lat, lon, "
                    "geonameid, confidence, score, detail, created, updated) "
                    "VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?) ON CONFLICT(key) DO UPDATE SET "
                    "version=excluded.version, status=excluded.status, reason=excluded.reason, "
                    "country=excluded.country, subdivision=excluded.subdivision, city=excluded.city, "
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
    def overrides(self, keys: Iterable[str] | None = None) -> dict[str, dict]:
        """Stored decisions, by key (all of them, or those of ``keys``)."""
        cols = (
            "key, text, country, subdivision, city, lat, lon, geonameid, not_a_place, note, decided_at, "
            "source"
        )
        if keys is None:
            rows = self.db.execute(
                f"SELECT {cols} FROM override ORDER BY decided_at, key"
            ).fetchall()
        else:
            keys = list(keys)
            rows = []
            for i in range(0, len(keys), 900):
                batch = keys[i : i + 900]
                rows += self.db.execute(
                    f"SELECT {cols} FROM override WHERE key IN ({','.join('?' * len(batch))})",
                    batch,
                ).fetchall()
        names = [c.strip() for c in cols.split(",")]
        return {r[0]: dict(zip(names, r)) for r in rows}

    def put_overrides(self, decisions: list[dict]) -> None:
        """Store decisions in one transaction."""
        with self.db.conn:
            self.db.table("override").upsert_all(decisions, pk="key")

    def delete_override(self, key: str) -> bool:
        with self.db.conn:
            cur = self.db.conn.execute("DELETE FROM override WHERE key = ?", (key,))
        return cur.rowcount > 0

    def put_queue(self, entries: list[dict]) -> None:
        with self.db.conn:
            self.db.table("queue").upsert_all(entries, pk="key")

    def queued(self, keys: Iterable[str]) -> set[str]:
        keys = list(keys)
        found: set[str] = set()
        for i in range(0, len(keys), 900):
            batch = keys[i : i + 900]
            found |= {
                r[0]
                for r in self.db.execute(
                    f"SELECT key FROM queue WHERE key IN ({','.join('?' * len(batch))})", batch
                )
            }
        return found

    # -- remote answers -------------------------------------------------------
    def remote_answers(self, provider: str, keys: Iterable[str]):
        """Cached answers of ``provider`` for ``keys`` (results, no-results and permanent errors)."""
        from .remote import answer_from_json

        keys = list(keys)
        out = {}
        for i in range(0, len(keys), 900):
            batch = keys[i : i + 900]
            for key, status, answer in self.db.execute(
                f"SELECT key, status, answer FROM remote_answer WHERE provider = ? AND key IN "
                f"({','.join('?' * len(batch))})",
                [provider, *batch],
            ):
                out[key] = answer_from_json(status, answer)
        return out

    def put_remote_answer(self, provider: str, key: str, answer, requests: int) -> None:
        """One answer and the requests it cost, in one transaction (an interrupted run keeps it)."""
        from .remote import answer_to_json

        now = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
        with self.db.conn:
            self.db.conn.execute(
                "INSERT OR REPLACE INTO remote_answer (provider, key, status, answer, asked_at) VALUES (?,?,?,?,?)",
                (provider, key, answer.status, answer_to_json(answer), now),
            )
            self._add_usage(provider, requests)

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

    def remote_used(self, provider: str) -> int:
        row = self.db.execute(
            "SELECT requests FROM remote_usage WHERE provider = ?", (provider,)
        ).fetchone()
        return int(row[0]) if row else 0

    def record_run(self, output: str, input: str, column: str) -> None:
        now = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
        with self.db.conn:
            self.db.table("run").upsert(
                {"output": output, "input": input, "column": column, "at": now}, pk="output"
            )

    def run_column(self, output: str) -> str | None:
        row = self.db.execute("SELECT column FROM run WHERE output = ?", (output,)).fetchone()
        return row[0] if row else None

    def count(self) -> int:
        return self.db.table("resolution").count

    def close(self) -> None:
        self.db.conn.close()
