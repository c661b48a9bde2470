"""The service's own state in ``DIR/service.sqlite``: jobs, token hashes, strings seen.

One file in WAL mode, written in short ``BEGIN IMMEDIATE`` transactions with a
long busy timeout, so the app, its job workers and ``geonorm serve token``
commands share it without "database is locked". The answers themselves live
in the cache (``DIR/cache.sqlite``), never here.

Tokens: ``gn_<id>_<secret>``. Only the id, the role and a salted scrypt hash
of the secret are stored; the token itself is shown once, when made.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import secrets
import sqlite3
import threading
import time
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..clock import utc_stamp
from ..errors import CacheError, InputError

__all__ = [
    "JOB_STATES",
    "ROLES",
    "Job",
    "ServiceStore",
    "TokenInfo",
    "role_allows",
]

ROLES = ("resolve", "review", "admin")  # each includes the ones before it
JOB_STATES = ("queued", "running", "done", "failed", "cancelled")
_BUSY_SECONDS = 60.0
_SCRYPT = {"n": 2**14, "r": 8, "p": 1, "dklen": 32}
_TOKEN_PREFIX = "gn_"
_ID_LENGTH = 12  # hex characters of a token's public id
_SEEN_BATCH = 2000  # rows seen written per transaction

_LAYOUT = (
    "CREATE TABLE IF NOT EXISTS token (id TEXT PRIMARY KEY, name TEXT NOT NULL UNIQUE, "
    "role TEXT NOT NULL, salt BLOB NOT NULL, hash BLOB NOT NULL, created TEXT NOT NULL)",
    "CREATE TABLE IF NOT EXISTS job (id TEXT PRIMARY KEY, state TEXT NOT NULL, "
    "[column] TEXT NOT NULL, accept REAL NOT NULL, format TEXT, input TEXT NOT NULL, "
    "output TEXT NOT NULL, upload_name TEXT, created REAL NOT NULL, updated REAL NOT NULL, "
    "rows INTEGER, [distinct] INTEGER, resolved INTEGER, progress REAL NOT NULL DEFAULT 0, "
    "summary TEXT, error TEXT, hint TEXT)",
    "CREATE TABLE IF NOT EXISTS seen (key TEXT PRIMARY KEY, text TEXT NOT NULL, "
    "rows INTEGER NOT NULL)",
    "CREATE INDEX IF NOT EXISTS seen_rows ON seen (rows DESC)",
    "CREATE TABLE IF NOT EXISTS job_key (job TEXT NOT NULL, key TEXT NOT NULL, "
    "text TEXT NOT NULL, rows INTEGER NOT NULL, PRIMARY KEY (job, key))",
)


def role_allows(role: str | None, needed: str) -> bool:
    """Whether ``role`` may do what ``needed`` may: admin ⊃ review ⊃ resolve."""
    return role in ROLES and ROLES.index(role) >= ROLES.index(needed)


def _hash(secret: str, salt: bytes) -> bytes:
    return hashlib.scrypt(secret.encode("utf-8"), salt=salt, **_SCRYPT)


def _split(token: str) -> tuple[str, str] | None:
    """A token's id and secret, or None for a string that is no token of ours."""
    if not token.startswith(_TOKEN_PREFIX):
        return None
    rest = token[len(_TOKEN_PREFIX) :]
    ident, sep, secret = (
        rest[:_ID_LENGTH],
        rest[_ID_LENGTH : _ID_LENGTH + 1],
        rest[_ID_LENGTH + 1 :],
    )
    if sep != "_" or not secret or len(secret) > 200:
        return None
    return ident, secret


@dataclass(frozen=True)
class TokenInfo:
    name: str
    role: str
    created: str


@dataclass
class Job:
    id: str
    state: str
    column: str
    accept: float
    format: str | None
    input: str
    output: str
    upload_name: str | None
    created: float
    updated: float
    rows: int | None
    distinct: int | None
    resolved: int | None
    progress: float
    summary: dict[str, Any] | None
    error: str | None
    hint: str | None

    def public(self) -> dict[str, Any]:
        """What ``GET /v1/jobs/{id}`` shows."""
        error = {"error": self.error, "hint": self.hint or ""} if self.error else None
        return {
            "id": self.id,
            "state": self.state,
            "rows": self.rows,
            "distinct": self.distinct,
            "resolved": self.resolved,
            "progress": round(self.progress, 4),
            "summary": self.summary,
            "error": error,
        }


_JOB_COLUMNS = (
    "id, state, [column], accept, format, input, output, upload_name, created, updated, rows, "
    "[distinct], resolved, progress, summary, error, hint"
)


def _job(row: tuple[Any, ...]) -> Job:
    values = list(row)
    values[14] = json.loads(values[14]) if values[14] else None
    return Job(*values)


class ServiceStore:
    """``DIR/service.sqlite``. Safe to share between threads (one lock, one connection)."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self._lock = threading.RLock()  # the writing connection
        self._read_lock = threading.Lock()  # the reading one
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            self.conn = sqlite3.connect(
                path, timeout=_BUSY_SECONDS, isolation_level=None, check_same_thread=False
            )
            self._set_up()
            # Reads have their own connection: in WAL mode they never wait for a write
            # (a token check on the event loop must not wait for a long flush).
            self._reader = sqlite3.connect(
                path, timeout=_BUSY_SECONDS, isolation_level=None, check_same_thread=False
            )
        except (sqlite3.Error, OSError) as exc:
            raise CacheError(
                f"cannot open the service state at {path} ({exc})",
                hint="check the data dir exists and is writable, and that no other program "
                "wrote service.sqlite",
            ) from exc

    def _set_up(self) -> None:
        deadline = time.monotonic() + _BUSY_SECONDS
        while True:  # switching to WAL answers "locked" at once while another opens the file
            try:
                if self.conn.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
                    self.conn.execute("PRAGMA journal_mode=WAL")
                self.conn.execute("PRAGMA synchronous=NORMAL")
                with self._write() as conn:
                    for statement in _LAYOUT:
                        conn.execute(statement)
                return
            except sqlite3.OperationalError as exc:
                if "locked" not in str(exc) or time.monotonic() > deadline:
                    raise
                time.sleep(0.05)

    @contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        with self._lock:
            self.conn.execute("BEGIN IMMEDIATE")
            try:
                yield self.conn
            except BaseException:
                if self.conn.in_transaction:
                    self.conn.execute("ROLLBACK")
                raise
            self.conn.execute("COMMIT")

    def _read(self, sql: str, params: Iterable[Any] = ()) -> list[tuple[Any, ...]]:
        with self._read_lock:
            return self._reader.execute(sql, tuple(params)).fetchall()

    def close(self) -> None:
        with self._lock, self._read_lock:
            self._reader.close()
            self.conn.close()

    # -- tokens ---------------------------------------------------------------
    def add_token(self, name: str, role: str) -> str:
        """Make a token; returns it (the only time it is seen), stores a salted hash."""
        name = name.strip()
        if not name or len(name) > 100 or not name.isprintable():
            raise InputError(
                f"{name!r} is not a usable token name",
                hint="give a short printable name, e.g. the team or program using it",
            )
        if role not in ROLES:
            raise InputError(f"unknown role {role!r}", hint=f"use one of: {', '.join(ROLES)}")
        ident = secrets.token_hex(_ID_LENGTH // 2)
        secret = secrets.token_urlsafe(32)
        salt = secrets.token_bytes(16)
        try:
            with self._write() as conn:
                conn.execute(
                    "INSERT INTO token (id, name, role, salt, hash, created) VALUES (?,?,?,?,?,?)",
                    (ident, name, role, salt, _hash(secret, salt), utc_stamp()),
                )
        except sqlite3.IntegrityError as exc:
            raise InputError(
                f"a token called {name!r} exists already",
                hint="pick another name, or revoke the old one first: geonorm serve token revoke",
            ) from exc
        return f"{_TOKEN_PREFIX}{ident}_{secret}"

    def tokens(self) -> list[TokenInfo]:
        rows = self._read("SELECT name, role, created FROM token ORDER BY name")
        return [TokenInfo(*r) for r in rows]

    def revoke_token(self, name: str) -> None:
        with self._write() as conn:
            gone = conn.execute("DELETE FROM token WHERE name = ?", (name,)).rowcount
        if not gone:
            raise InputError(
                f"no token is called {name!r}", hint="see the names with: geonorm serve token list"
            )

    def has_tokens(self) -> bool:
        return bool(self._read("SELECT 1 FROM token LIMIT 1"))

    def check_token(self, token: str) -> tuple[str, str, bytes] | None:
        """The token's id, role and the hash it proves, or None (constant-time compare)."""
        parts = _split(token)
        if parts is None:
            return None
        ident, secret = parts
        rows = self._read("SELECT role, salt, hash FROM token WHERE id = ?", (ident,))
        if not rows:
            return None
        role, salt, stored = rows[0]
        if not hmac.compare_digest(_hash(secret, salt), stored):
            return None
        return ident, role, stored

    def token_role(self, ident: str) -> str | None:
        """The role of a token id still stored (None once revoked)."""
        rows = self._read("SELECT role FROM token WHERE id = ?", (ident,))
        return rows[0][0] if rows else None

    # -- jobs -----------------------------------------------------------------
    def add_job(self, job: Job) -> None:
        with self._write() as conn:
            conn.execute(
                f"INSERT INTO job ({_JOB_COLUMNS}) VALUES ({','.join('?' * 17)})",
                (
                    job.id,
                    job.state,
                    job.column,
                    job.accept,
                    job.format,
                    job.input,
                    job.output,
                    job.upload_name,
                    job.created,
                    job.updated,
                    job.rows,
                    job.distinct,
                    job.resolved,
                    job.progress,
                    json.dumps(job.summary) if job.summary is not None else None,
                    job.error,
                    job.hint,
                ),
            )

    def job(self, job_id: str) -> Job | None:
        rows = self._read(f"SELECT {_JOB_COLUMNS} FROM job WHERE id = ?", (job_id,))
        return _job(rows[0]) if rows else None

    def jobs(self, states: Iterable[str] | None = None) -> list[Job]:
        if states is None:
            rows = self._read(f"SELECT {_JOB_COLUMNS} FROM job ORDER BY created, id")
        else:
            wanted = list(states)
            rows = self._read(
                f"SELECT {_JOB_COLUMNS} FROM job WHERE state IN ({','.join('?' * len(wanted))}) "
                "ORDER BY created, id",
                wanted,
            )
        return [_job(r) for r in rows]

    def count_jobs(self) -> dict[str, int]:
        counts = dict.fromkeys(JOB_STATES, 0)
        for state, n in self._read("SELECT state, count(*) FROM job GROUP BY state"):
            counts[state] = n
        return counts

    def update_job(
        self, job_id: str, *, only_if: Iterable[str] | None = None, **fields: Any
    ) -> bool:
        """Set fields of a job (in the states ``only_if``, when given); whether it changed."""
        if "summary" in fields and fields["summary"] is not None:
            fields["summary"] = json.dumps(fields["summary"])
        fields["updated"] = time.time()
        names = ", ".join(f"[{k}] = ?" for k in fields)
        sql = f"UPDATE job SET {names} WHERE id = ?"
        params: list[Any] = [*fields.values(), job_id]
        if only_if is not None:
            states = list(only_if)
            sql += f" AND state IN ({','.join('?' * len(states))})"
            params += states
        with self._write() as conn:
            return conn.execute(sql, params).rowcount > 0

    def delete_job(self, job_id: str) -> None:
        with self._write() as conn:
            conn.execute("DELETE FROM job WHERE id = ?", (job_id,))
            conn.execute("DELETE FROM job_key WHERE job = ?", (job_id,))

    def old_jobs(self, before: float) -> list[str]:
        """Jobs made before ``before`` (seconds since the epoch) that no worker is running."""
        rows = self._read(
            "SELECT id FROM job WHERE created < ? AND state NOT IN ('queued', 'running')",
            (before,),
        )
        return [r[0] for r in rows]

    # -- strings seen, for ranking the review -------------------------------------
    def add_seen(self, counts: Mapping[str, tuple[str, int]]) -> None:
        """Add rows seen per key (key → (a text, rows))."""
        rows = [(k, t, n) for k, (t, n) in counts.items()]
        for i in range(0, len(rows), _SEEN_BATCH):  # short transactions: others write between
            with self._write() as conn:
                conn.executemany(
                    "INSERT INTO seen (key, text, rows) VALUES (?, ?, ?) ON CONFLICT(key) "
                    "DO UPDATE SET rows = rows + excluded.rows",
                    rows[i : i + _SEEN_BATCH],
                )

    def seen_page(self, offset: int, size: int) -> list[tuple[str, str, int]]:
        """Keys seen, most rows first."""
        return [
            (k, t, int(n))
            for k, t, n in self._read(
                "SELECT key, text, rows FROM seen ORDER BY rows DESC, key LIMIT ? OFFSET ?",
                (size, offset),
            )
        ]

    def set_job_keys(self, job_id: str, items: Iterable[tuple[str, str, int]]) -> None:
        """The doubtful keys of a finished job: (key, text, rows)."""
        with self._write() as conn:
            conn.execute("DELETE FROM job_key WHERE job = ?", (job_id,))
            conn.executemany(
                "INSERT OR REPLACE INTO job_key (job, key, text, rows) VALUES (?, ?, ?, ?)",
                [(job_id, k, t, n) for k, t, n in items],
            )

    def job_keys(self, job_id: str) -> list[tuple[str, str, int]]:
        return [
            (k, t, int(n))
            for k, t, n in self._read(
                "SELECT key, text, rows FROM job_key WHERE job = ? ORDER BY rows DESC, key",
                (job_id,),
            )
        ]
