"""SQLite cache of resolutions: one row per distinct normalised string.

The table ``resolution`` holds the whole answer (candidates too) as JSON, with
the resolver and index version that produced it and timestamps. A row made by
another resolver version or accept threshold is treated as a miss, so a new
index never serves stale answers. WAL mode lets a reader and a writer share
the file; writes are batched in one transaction per chunk.
"""

from __future__ import annotations

import json
import os
import sqlite3
import time
from collections.abc import Iterable, Mapping
from pathlib import Path

import sqlite_utils

from .errors import CacheError
from .index import data_dir
from .resolution import Resolution

__all__ = ["Cache", "default_cache_path"]


def default_cache_path() -> Path:
    env = os.environ.get("GEONORM_CACHE")
    return Path(env) if env else data_dir() / "cache.sqlite"


class Cache:
    def __init__(self, path: Path | str | None = None) -> None:
        self.path = Path(path) if path else default_cache_path()
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            conn = sqlite3.connect(self.path, timeout=30, check_same_thread=False)
            self.db = sqlite_utils.Database(conn)
            self.db.execute("PRAGMA journal_mode=WAL")
            self.db.execute("PRAGMA synchronous=NORMAL")
            if "resolution" not in self.db.table_names():
                self.db["resolution"].create(
                    {"key": str, "version": str, "status": str, "country": str, "confidence": float,
                     "reason": str, "data": str, "created": str, "updated": str},
                    pk="key",
                )
        except (sqlite3.DatabaseError, OSError) as exc:
            raise CacheError(f"cannot open the cache at {self.path} ({exc})",
                             hint="pass another file with --cache PATH, or delete the damaged file") from exc

    def get_many(self, keys: Iterable[str], version: str) -> dict[str, Resolution]:
        """Look up many keys in a few queries (not one query per key)."""
        keys = list(keys)
        out: dict[str, Resolution] = {}
        for i in range(0, len(keys), 900):
            batch = keys[i:i + 900]
            marks = ",".join("?" * len(batch))
            rows = self.db.execute(
                f"SELECT key, data FROM resolution WHERE version = ? AND key IN ({marks})", [version, *batch]
            ).fetchall()
            for key, data in rows:
                out[key] = Resolution.from_dict(json.loads(data))
        return out

    def put_many(self, items: Mapping[str, Resolution], version: str) -> None:
        now = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
        rows = [
            {"key": k, "version": version, "status": r.status.value, "country": r.country,
             "confidence": r.confidence, "reason": r.reason.value,
             "data": json.dumps(r.to_dict(), ensure_ascii=False, sort_keys=True), "created": now, "updated": now}
            for k, r in items.items()
        ]
        if not rows:
            return
        try:
            with self.db.conn:
                self.db.conn.executemany(
                    "INSERT INTO resolution (key, version, status, country, confidence, reason, data, created, "
                    "updated) VALUES (:key, :version, :status, :country, :confidence, :reason, :data, :created, "
                    ":updated) ON CONFLICT(key) DO UPDATE SET version=excluded.version, status=excluded.status, "
                    "country=excluded.country, confidence=excluded.confidence, reason=excluded.reason, "
                    "data=excluded.data, updated=excluded.updated", rows)
        except sqlite3.DatabaseError as exc:
            raise CacheError(f"cannot write to the cache at {self.path} ({exc})",
                             hint="check the disk has space and the file is writable") from exc

    def count(self) -> int:
        return self.db["resolution"].count

    def close(self) -> None:
        self.db.conn.close()
