"""SQLite cache of resolutions: one row per distinct normalised string.

The table ``resolution`` holds the whole answer: the geo fields as columns and
the candidates and per-country evidence as JSON, with the resolver, index and
calibration version that produced it, and timestamps. A row made by another
version is a miss, so a new index never serves stale answers. WAL mode lets a
reader and a writer share the file; writes are batched in one transaction per
chunk, so an interrupted run keeps what it committed.

For reruns of whole files (``columnar.answer_table``) three more tables hold,
under the resolver version that made them: ``text_key``, each raw text's key
(stored when the text is first normalised; cells longer than a few thousand
characters are not kept); ``answer_pack``, raw texts with their stored
answers as blocks of columns (Parquet; Arrow IPC in layout 4), read back in
one query; and
``prior_pack``, what a file prior did to the answers it weighed, by the
prior's fingerprint. All three are caches of the tables above: rows of
another resolver version are never read.

A cache file is marked as ours by ``PRAGMA application_id`` (``APPLICATION_ID``)
and a table ``geonorm_meta`` holding the layout version (``CACHE_SCHEMA``).
Opening a file:

- a new or empty file becomes a cache;
- our own cache is used as it is (one made by a newer layout is refused);
- a cache of an earlier release (no marker, but only our tables with our
  columns) is marked and migrated: its stored answers are dropped when their
  layout is older, review decisions and everything else are kept;
- any other SQLite file is refused with a ``CacheError`` and left unchanged:
  no table we did not create is ever dropped.

The layout is set up in one ``BEGIN IMMEDIATE`` transaction with ``CREATE
TABLE IF NOT EXISTS``, so many runs opening one new file at once all succeed.
Every write is one explicit transaction: a killed run leaves all of it or
none of it.
"""

from __future__ import annotations

import functools
import io
import itertools
import json
import os
import random
import sqlite3
import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any, ParamSpec, TypeVar

from ..clock import utc_stamp
from ..errors import CacheError
from ..paths import data_dir
from ..resolve.resolution import Candidate, Reason, Resolution, Status
from .remote_answer import RemoteAnswer, answer_from_json, answer_to_json

if TYPE_CHECKING:  # polars is imported where columns are read: a lookup does not need it
    import polars as pl

__all__ = ["APPLICATION_ID", "CACHE_SCHEMA", "Cache", "default_cache_path"]

# Layout of our tables, kept in geonorm_meta; 2 was the last unmarked one. 5: blocks of
# columns are stored as Parquet (4 stored Arrow IPC, which is still read).
CACHE_SCHEMA = 5
APPLICATION_ID = 0x67656F6E  # "geon" in ASCII: PRAGMA application_id of a geonorm cache
_BUSY_SECONDS = 60.0  # how long to wait for another run's write lock before giving up
# Reasons whose answers the file prior may re-rank: their evidence is read back.
_DETAILED = {Reason.AMBIGUOUS.value, Reason.CITY_BY_SIZE.value, Reason.SEVERAL_COUNTRIES.value}
_STATUS = {s.value: s for s in Status}
_REASON = {r.value: r for r in Reason}


# The answer columns read in bulk (``answer_rows``), with their polars types.
ANSWER_COLUMNS: dict[str, str] = {
    "key": "String",
    "status": "String",
    "reason": "String",
    "country": "String",
    "subdivision": "String",
    "city": "String",
    "lat": "Float64",
    "lon": "Float64",
    "confidence": "Float64",
}
_SCAN_SHARE = 4  # asking for at least 1/4 of a table: one sequential scan beats IN queries
_SCAN_MIN = 5000  # below this many keys, IN queries always
_PACKS = 16  # answer packs kept before they are merged into one
_PRIORS = 16  # file priors whose results are kept (the latest)
_PACK_ROWS = 1_000_000  # packs up to this many rows are read whatever a run asks for


_T = TypeVar("_T")
_P = ParamSpec("_P")
_BATCH = 900  # keys per "IN (...)" query: below SQLite's limit on bound parameters

_RESOLUTION_COLUMNS = (
    "key, version, status, reason, country, subdivision, city, lat, lon, geonameid, "
    "confidence, score, detail, created, updated"
)
_OVERRIDE_COLUMNS = (
    "key",
    "text",
    "country",
    "subdivision",
    "city",
    "lat",
    "lon",
    "geonameid",
    "not_a_place",
    "note",
    "decided_at",
    "source",
)
# The layout: (table, column definitions, primary key). Types as earlier releases made them.
_LAYOUT: tuple[tuple[str, str, str], ...] = (
    (
        "resolution",
        "[key] TEXT, [version] TEXT, [status] TEXT, [reason] TEXT, [country] TEXT, "
        "[subdivision] TEXT, [city] TEXT, [lat] FLOAT, [lon] FLOAT, [geonameid] INTEGER, "
        "[confidence] FLOAT, [score] FLOAT, [detail] TEXT, [created] TEXT, [updated] TEXT",
        "[key]",
    ),
    (
        "override",
        "[key] TEXT, [text] TEXT, [country] TEXT, [subdivision] TEXT, [city] TEXT, "
        "[lat] FLOAT, [lon] FLOAT, [geonameid] INTEGER, [not_a_place] INTEGER, [note] TEXT, "
        "[decided_at] TEXT, [source] TEXT",
        "[key]",
    ),
    ("queue", "[key] TEXT, [text] TEXT, [exported_at] TEXT, [file] TEXT", "[key]"),
    (
        "remote_answer",
        "[provider] TEXT, [key] TEXT, [status] TEXT, [answer] TEXT, [asked_at] TEXT",
        "[provider], [key]",
    ),
    ("remote_usage", "[provider] TEXT, [requests] INTEGER", "[provider]"),
    ("run", "[output] TEXT, [input] TEXT, [column] TEXT, [at] TEXT, [remote] TEXT", "[output]"),
    ("geonorm_meta", "[name] TEXT, [value] TEXT", "[name]"),
    # Raw text → its key, as the resolver version of ``version`` normalised it (layout 4).
    ("text_key", "[text] TEXT, [version] TEXT, [key] TEXT", "[text]"),
    # Stored answers by raw text, as blocks of columns (``_block``) (layout 4).
    ("answer_pack", "[id] INTEGER, [version] TEXT, [rows] INTEGER, [data] BLOB", "[id]"),
    # What a file prior did to the answers it weighed, by the prior's fingerprint (layout 4).
    ("prior_pack", "[fingerprint] TEXT, [version] TEXT, [at] TEXT, [data] BLOB", "[fingerprint]"),
)
# Tables no unmarked cache had.
_SINCE_MARKED = frozenset({"geonorm_meta", "text_key", "answer_pack", "prior_pack"})


def _columns(definition: str) -> frozenset[str]:
    return frozenset(part.split("]")[0].strip(" [") for part in definition.split(","))


# Tables and column sets of the caches earlier releases made (no marker): a file holding
# only these is ours to migrate. The first resolution layout kept the answer as JSON.
_EARLIER: dict[str, tuple[frozenset[str], ...]] = {
    name: (_columns(cols),) for name, cols, _ in _LAYOUT if name not in _SINCE_MARKED
}
_EARLIER["resolution"] += (
    _columns("[key], [version], [status], [country], [confidence], [reason], [data], [created]")
    | {"updated"},
)
_EARLIER["run"] += (_columns("[output], [input], [column], [at]"),)
_LAST_UNMARKED = 2  # PRAGMA user_version of the last unmarked layout, whose answers stay


# -- what an SQLite error means for the user ----------------------------------
_BUSY, _LOCKED, _CORRUPT, _FULL, _NOTADB = 5, 6, 11, 13, 26
_NOT_WRITABLE = {3, 8, 14}  # SQLITE_PERM, SQLITE_READONLY, SQLITE_CANTOPEN


_DAMAGED = (
    "the cache file is damaged; restore it from a backup, or pass another `cache` "
    "file (a new cache resolves every string again, and has no review decisions)"
)


def _hint(exc: BaseException) -> str:
    """What to do next, from the cause of ``exc`` (its SQLite result code, else its text)."""
    code = getattr(exc, "sqlite_errorcode", None)
    code = code & 0xFF if isinstance(code, int) else None
    text = str(exc).lower()
    if code in (_BUSY, _LOCKED) or "locked" in text:
        return (
            "another run is using this cache and holds its lock; wait for it to finish, "
            "or pass another `cache` file"
        )
    if code == _NOTADB or "not a database" in text:
        return (
            "the file is not an SQLite database; pass another `cache` file "
            "(a new file name makes a new cache)"
        )
    if code == _CORRUPT or "malformed" in text:
        return _DAMAGED
    if code == _FULL or "disk is full" in text:
        return "the disk is full; free some space and run again"
    if code in _NOT_WRITABLE or isinstance(exc, OSError) or "readonly" in text:
        return "check the file and its folder exist and are writable, or pass another `cache` file"
    return "check the disk has space and the file is writable"


def _guarded(method: Callable[_P, _T]) -> Callable[_P, _T]:
    """Let every SQLite error of a cache method leave as a ``CacheError`` with a hint."""

    @functools.wraps(method)
    def wrapper(*args: _P.args, **kwargs: _P.kwargs) -> _T:
        try:
            return method(*args, **kwargs)
        except sqlite3.Error as exc:
            path = getattr(args[0], "path", "?")
            raise CacheError(f"the cache at {path} failed: {exc}", hint=_hint(exc)) from exc

    return wrapper


@contextmanager
def _transaction(conn: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    """One explicit write transaction: ``BEGIN IMMEDIATE`` … ``COMMIT``, all or nothing."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield conn
    except BaseException:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def default_cache_path() -> Path:
    env = os.environ.get("GEONORM_CACHE")
    return Path(env) if env else data_dir() / "cache.sqlite"


# -- recognising and setting up a cache file ----------------------------------
@contextmanager
def _snapshot(conn: sqlite3.Connection) -> Iterator[None]:
    """A read transaction: the statements inside see one state of the file."""
    conn.execute("BEGIN DEFERRED")
    try:
        yield
    finally:
        conn.execute("COMMIT")


def _tables(conn: sqlite3.Connection) -> dict[str, frozenset[str]]:
    """The file's own tables (SQLite's internal ones aside) and their columns."""
    names = [
        r[0]
        for r in conn.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite\\_%' "
            "ESCAPE '\\'"
        )
    ]
    return {
        n: frozenset(r[0] for r in conn.execute("SELECT name FROM pragma_table_info(?)", (n,)))
        for n in names
    }


def _inspect(conn: sqlite3.Connection) -> tuple[str, dict[str, frozenset[str]]]:
    """What the file is: "new", "ours", "earlier" (an unmarked cache) or "foreign"."""
    if conn.in_transaction:
        app_id, tables, objects = _facts(conn)
    else:
        with _snapshot(conn):  # one read transaction: another run may be setting it up
            app_id, tables, objects = _facts(conn)
    if app_id == APPLICATION_ID:
        return "ours", tables
    if app_id or (objects and not tables):
        return "foreign", tables
    if not tables:
        return "new", tables
    if all(cols in _EARLIER.get(name, ()) for name, cols in tables.items()):
        return "earlier", tables
    return "foreign", tables


def _facts(conn: sqlite3.Connection) -> tuple[int, dict[str, frozenset[str]], int]:
    """The file's application id, its tables and how many schema objects it has."""
    app_id = int(conn.execute("PRAGMA application_id").fetchone()[0])
    objects = int(conn.execute("SELECT count(*) FROM sqlite_master").fetchone()[0])
    return app_id, _tables(conn), objects


def _layout_version(conn: sqlite3.Connection, tables: Mapping[str, Any]) -> int:
    if "geonorm_meta" not in tables:
        return 0
    row = conn.execute("SELECT value FROM geonorm_meta WHERE name = 'layout'").fetchone()
    return int(row[0]) if row and str(row[0]).isdigit() else 0


def _refuse_foreign(path: Path, conn: sqlite3.Connection, tables: Mapping[str, Any]) -> CacheError:
    names = ", ".join(sorted(tables)[:5]) + (", …" if len(tables) > 5 else "")
    app_id = conn.execute("PRAGMA application_id").fetchone()[0]
    what = f"it holds the tables {names}" if names else f"its application id is {app_id:#x}"
    return CacheError(
        f"{path} is not a geonorm cache ({what}); it was left unchanged",
        hint="pass a new file name with `cache` (geonorm makes the cache), "
        "or the cache file of an earlier run",
    )


def _migrate(conn: sqlite3.Connection, tables: Mapping[str, frozenset[str]]) -> None:
    """Bring an unmarked cache of an earlier release to this layout; decisions stay."""
    resolution = tables.get("resolution")
    older = conn.execute("PRAGMA user_version").fetchone()[0] != _LAST_UNMARKED
    if resolution is not None and (older or "data" in resolution):
        conn.execute("DROP TABLE resolution")  # answers of an older layout: made again
    run = tables.get("run")
    if run is not None and "remote" not in run:
        conn.execute("ALTER TABLE run ADD COLUMN [remote] TEXT")


def _set_up(conn: sqlite3.Connection, path: Path) -> None:
    """Recognise the file, refuse another program's, create or migrate our layout."""
    kind, tables = _inspect(conn)  # read only: a foreign file is refused untouched
    if kind == "foreign":
        raise _refuse_foreign(path, conn, tables)
    if kind == "ours":
        layout = _layout_version(conn, tables)
        if layout > CACHE_SCHEMA:
            raise CacheError(
                f"the cache at {path} was made by a newer geonorm (layout {layout}; "
                f"this one reads layout {CACHE_SCHEMA})",
                hint="upgrade geonorm, or pass another `cache` file",
            )
        if layout == CACHE_SCHEMA and all(name in tables for name, _, _ in _LAYOUT):
            _use_wal(conn)
            return
    _use_wal(conn)
    with _transaction(conn):
        kind, tables = _inspect(conn)  # again, under the write lock: another run may be first
        if kind == "foreign":
            raise _refuse_foreign(path, conn, tables)
        if kind == "earlier":
            _migrate(conn, tables)
        for name, columns, key in _LAYOUT:
            conn.execute(f"CREATE TABLE IF NOT EXISTS [{name}] ({columns}, PRIMARY KEY ({key}))")
        conn.execute(
            "INSERT INTO geonorm_meta (name, value) VALUES ('layout', ?) "
            "ON CONFLICT(name) DO UPDATE SET value = excluded.value",
            (str(CACHE_SCHEMA),),
        )
        conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")


def _use_wal(conn: sqlite3.Connection) -> None:
    """WAL lets a reader and a writer share the file (set once; it stays with the file)."""
    if conn.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
        conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("PRAGMA synchronous=NORMAL")


# An answer as the cache stores it: key, status, reason, country, subdivision, city, lat,
# lon, geonameid, confidence, score and ``detail`` (candidates and evidence as JSON).
StoredRow = tuple[Any, ...]


def stored_row(key: str, res: Resolution) -> StoredRow:
    """``res`` as the cache stores it (``put_rows``); ``answer_of_row`` reads it back."""
    return (
        key,
        res.status.value,
        res.reason.value,
        res.country,
        res.subdivision,
        res.city,
        res.lat,
        res.lon,
        res.geonameid,
        res.confidence,
        res.score,
        json.dumps(
            {"candidates": [c.__dict__ for c in res.candidates], "evidence": res.evidence},
            ensure_ascii=False,
        ),
    )


def answer_of_row(row: Sequence[Any], full: bool = True) -> Resolution:
    """A stored answer from its row; candidates and evidence only where they are needed
    (all with ``full``)."""
    _key, status, reason, country, sub, city, lat, lon, gid, conf, score, detail = row
    res = Resolution(
        _STATUS[status], _REASON[reason], country, sub, city, lat, lon, gid, conf, score
    )
    if full or reason in _DETAILED:
        extra = json.loads(detail)
        res.candidates = [Candidate(**c) for c in extra["candidates"]]
        res.evidence = extra["evidence"]
    elif country:
        res.evidence = {country: 1.0}
    return res


def _first_of_each(frame: pl.DataFrame) -> pl.DataFrame:
    """The first row of each text (two runs may have stored one text at once)."""
    texts = frame.get_column("text")
    return frame if texts.n_unique() == frame.height else frame.filter(texts.is_first_distinct())


def _block(frame: pl.DataFrame) -> bytes:
    """A block of columns as stored: Parquet, which reads back faster than Arrow IPC."""
    out = io.BytesIO()
    frame.write_parquet(out, compression="lz4")
    return out.getvalue()


def _frame_of(block: bytes) -> pl.DataFrame:
    """A stored block of columns: Parquet, or Arrow IPC as caches of layout 4 first stored."""
    import polars as pl

    if block[:4] == b"PAR1":
        return pl.read_parquet(io.BytesIO(block))
    return pl.read_ipc(io.BytesIO(block))


def _columns_of(rows: Sequence[Sequence[Any]], schema: Mapping[str, str]) -> pl.DataFrame:
    """Rows read from SQLite as a polars frame of ``schema`` (names of polars types),
    column by column (fast)."""
    import polars as pl

    columns = list(zip(*rows, strict=True)) if rows else [() for _ in schema]
    return pl.DataFrame(
        [
            pl.Series(name, values, dtype=getattr(pl, dtype))
            for (name, dtype), values in zip(schema.items(), columns, strict=True)
        ]
    )


def _set_up_patiently(conn: sqlite3.Connection, path: Path, timeout: float) -> None:
    """``_set_up``, tried again while another process holds the lock.

    SQLite answers "database is locked" at once, without waiting for the busy
    timeout, where waiting could deadlock (switching the journal mode, upgrading a
    read to a write); many runs opening one new file meet that. Setting up is
    idempotent, so it is simply tried again, with a short jittered pause, until
    ``timeout`` seconds have passed.
    """
    deadline = time.monotonic() + timeout
    pause = 0.02
    while True:
        try:
            _set_up(conn, path)
            return
        except sqlite3.OperationalError as exc:
            if conn.in_transaction:
                conn.rollback()
            busy = "locked" in str(exc) or "busy" in str(exc)
            if not busy or time.monotonic() >= deadline:
                raise
        time.sleep(pause * (0.5 + random.random()))
        pause = min(pause * 2, 0.5)


class Cache:
    """The answers, decisions, queue, remote answers and run records of one SQLite file.

    Use it as a context manager (``with Cache(path) as cache:``) to close it at the
    end; every SQLite error leaves its methods as a ``CacheError``. ``timeout`` is
    how many seconds to wait while another run holds the write lock.
    """

    def __init__(self, path: Path | str | None = None, *, timeout: float = _BUSY_SECONDS) -> None:
        self.path = Path(path) if path else default_cache_path()
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            # Autocommit: every write below opens its own explicit transaction.
            conn = sqlite3.connect(
                self.path, timeout=timeout, isolation_level=None, check_same_thread=False
            )
        except (sqlite3.Error, OSError) as exc:
            raise CacheError(
                f"cannot open the cache at {self.path} ({exc})", hint=_hint(exc)
            ) from exc
        try:
            _set_up_patiently(conn, self.path, timeout)
        except (sqlite3.Error, OSError) as exc:
            conn.close()
            raise CacheError(
                f"cannot open the cache at {self.path} ({exc})", hint=_hint(exc)
            ) from exc
        except BaseException:
            conn.close()
            raise
        self.db = conn

    def __enter__(self) -> Cache:
        return self

    def __exit__(self, exc_type: object, *rest: object) -> None:
        try:
            self.close()
        except CacheError:
            if exc_type is None:  # an error already on its way says more
                raise

    @property
    def conn(self) -> sqlite3.Connection:
        return self.db

    def _in_batches(
        self, sql: str, keys: Sequence[str], before: Sequence[Any] = ()
    ) -> Iterator[Any]:
        """Rows of ``sql`` (whose ``{marks}`` stands for the key list) over ``keys`` in batches."""
        for i in range(0, len(keys), _BATCH):
            batch = keys[i : i + _BATCH]
            yield from self.conn.execute(
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
            "confidence, score, detail FROM resolution WHERE version = ?"
        )
        if len(keys) > 5000 and len(keys) * 4 >= self.count():
            # Asking for a good part of the table: one sequential scan beats many IN queries.
            wanted = set(keys)
            rows: Iterable[Any] = [
                row for row in self.conn.execute(columns, [version]) if row[0] in wanted
            ]
        else:
            rows = list(self._in_batches(f"{columns} AND key IN ({{marks}})", keys, [version]))
        for row in rows:
            try:
                out[row[0]] = answer_of_row(row, full)
            except (KeyError, TypeError, ValueError) as exc:  # a row SQLite read, but damaged
                raise CacheError(
                    f"an answer stored in the cache at {self.path} is damaged "
                    f"({type(exc).__name__}: {exc})",
                    hint=_DAMAGED,
                ) from exc
        return out

    @_guarded
    def put_many(self, items: Mapping[str, Resolution], version: str) -> None:
        """Store answers in one transaction."""
        self.put_rows([stored_row(k, r) for k, r in items.items()], version)

    @_guarded
    def put_rows(self, rows: Sequence[StoredRow], version: str) -> None:
        """Store answers as rows (``stored_row``) in one transaction."""
        if not rows:
            return
        now = utc_stamp()
        with _transaction(self.conn) as conn:
            conn.executemany(
                f"INSERT INTO resolution ({_RESOLUTION_COLUMNS}) "
                "VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?) ON CONFLICT(key) DO UPDATE SET "
                "version=excluded.version, status=excluded.status, reason=excluded.reason, "
                "country=excluded.country, subdivision=excluded.subdivision, "
                "city=excluded.city, lat=excluded.lat, lon=excluded.lon, "
                "geonameid=excluded.geonameid, confidence=excluded.confidence, "
                "score=excluded.score, detail=excluded.detail, updated=excluded.updated",
                [(row[0], version, *row[1:], now, now) for row in rows],
            )

    # -- in bulk, as columns (the warm path of a whole file) ------------------
    def _scan_rather(self, table: str, wanted: int) -> bool:
        """Whether one sequential scan of ``table`` beats IN queries for ``wanted`` keys."""
        if wanted <= _SCAN_MIN:
            return False
        # The largest rowid: as many rows as the table ever held at once, read in O(log n).
        top = self.conn.execute(f"SELECT max(rowid) FROM [{table}]").fetchone()[0] or 0
        return wanted * _SCAN_SHARE >= top

    def _frame(
        self, sql: str, wanted: pl.Series, table: str, schema: Mapping[str, str], before: Any
    ) -> pl.DataFrame:
        """Rows of ``sql`` whose first column is among ``wanted``, as a polars frame.

        ``sql`` reads the whole of ``table`` (one scan, when ``wanted`` is a good part
        of it) or, with `` AND <first column> IN ({marks})`` appended, batches of keys.
        """
        import polars as pl

        first = next(iter(schema))
        if self._scan_rather(table, wanted.len()):
            rows: list[Any] = self.conn.execute(sql, before).fetchall()
            return _columns_of(rows, schema).filter(pl.col(first).is_in(wanted.implode()))
        rows = list(self._in_batches(f"{sql} AND {first} IN ({{marks}})", wanted.to_list(), before))
        return _columns_of(rows, schema)

    @_guarded
    def text_keys(self, texts: pl.Series, version: str) -> pl.DataFrame:
        """The stored keys (``text``, ``key``) of the raw ``texts`` under resolver ``version``.

        A key is stored by ``put_text_keys`` when a text is first normalised; a
        text normalised by another resolver version has none here.
        """
        schema = {"text": "String", "key": "String"}
        texts = texts.drop_nulls().unique()
        sql = "SELECT text, key FROM text_key WHERE version = ?"
        return self._frame(sql, texts, "text_key", schema, [version])

    @_guarded
    def put_text_keys(self, texts: Sequence[str], keys: Sequence[str], version: str) -> None:
        """Store the key of each raw text (one transaction)."""
        if not texts:
            return
        with _transaction(self.conn) as conn:
            conn.executemany(
                "INSERT INTO text_key (text, version, key) VALUES (?, ?, ?) ON CONFLICT(text) "
                "DO UPDATE SET version = excluded.version, key = excluded.key",
                zip(texts, itertools.repeat(version), keys),
            )

    @_guarded
    def answer_rows(self, keys: pl.Series, version: str) -> pl.DataFrame:
        """The stored answers of ``keys`` as columns (``ANSWER_COLUMNS``), in a few queries."""

        sql = f"SELECT {', '.join(ANSWER_COLUMNS)} FROM resolution WHERE version = ?"
        frame = self._frame(
            sql, keys.drop_nulls().unique(), "resolution", ANSWER_COLUMNS, [version]
        )
        return self.checked_answers(frame)

    def checked_answers(self, frame: pl.DataFrame) -> pl.DataFrame:
        """``frame`` of answer columns, refused when a status or reason is not ours."""
        import polars as pl

        try:
            frame.select(
                pl.col("status").cast(pl.Enum(list(_STATUS))),
                pl.col("reason").cast(pl.Enum(list(_REASON))),
            )
        except pl.exceptions.PolarsError as exc:
            raise CacheError(
                f"an answer stored in the cache at {self.path} is damaged ({exc})",
                hint=_DAMAGED,
            ) from exc
        return frame

    @_guarded
    def packed_answers(self, texts: pl.Series, version: str) -> pl.DataFrame | None:
        """Stored answers by raw text, from the packs of resolver ``version``: ``text``,
        ``key`` and ``ANSWER_COLUMNS``, for those of ``texts`` a pack holds.

        A pack is a block of columns (``_block``) that ``put_pack`` stored. None when
        there is none, or when the packs hold far more texts than asked for (the
        answers are then read by key).
        """
        frame = self.answer_packs(version, texts.len())
        if frame is None:
            return None
        frame = frame.filter(frame.get_column("text").is_in(texts.drop_nulls().implode()))
        return self.checked_answers(frame)

    @_guarded
    def answer_packs(self, version: str, wanted: int) -> pl.DataFrame | None:
        """Every text the packs of resolver ``version`` hold (``put_pack``), with its key and
        stored answer (``text``, ``key`` and ``ANSWER_COLUMNS``; the first of a text stored
        twice), for a run that asks for ``wanted`` texts. None when there is none, or when
        the packs hold far more texts than that (the answers are then read by key).

        Not checked: the rows a run uses go through ``checked_answers``.
        """
        import polars as pl

        held = self.conn.execute(
            "SELECT count(*), sum(rows) FROM answer_pack WHERE version = ?", (version,)
        ).fetchone()
        if not held[0] or held[1] > max(_PACK_ROWS, _SCAN_SHARE * wanted):
            return None
        blobs = self.conn.execute(
            "SELECT data FROM answer_pack WHERE version = ? ORDER BY id", (version,)
        ).fetchall()
        try:
            frame = pl.concat([_frame_of(blob) for (blob,) in blobs])
            frame = frame.select(["text", *ANSWER_COLUMNS]).cast(
                {
                    name: getattr(pl, kind)
                    for name, kind in {"text": "String", **ANSWER_COLUMNS}.items()
                }
            )
        except (OSError, TypeError, pl.exceptions.PolarsError) as exc:
            raise CacheError(
                f"a block of answers stored in the cache at {self.path} is damaged ({exc})",
                hint=_DAMAGED,
            ) from exc
        return _first_of_each(frame)

    @_guarded
    def put_pack(self, frame: pl.DataFrame, version: str) -> None:
        """Store answers by raw text as one pack (one transaction). Packs of other resolver
        versions are dropped; many packs are merged into one."""
        import polars as pl

        with _transaction(self.conn) as conn:
            conn.execute("DELETE FROM answer_pack WHERE version <> ?", (version,))
            conn.execute(
                "INSERT INTO answer_pack (version, rows, data) VALUES (?, ?, ?)",
                (version, frame.height, _block(frame)),
            )
            count = conn.execute("SELECT count(*) FROM answer_pack").fetchone()[0]
            if count > _PACKS:
                blobs = conn.execute("SELECT data FROM answer_pack ORDER BY id").fetchall()
                merged = _first_of_each(pl.concat([_frame_of(b) for (b,) in blobs]))
                conn.execute("DELETE FROM answer_pack")
                conn.execute(
                    "INSERT INTO answer_pack (version, rows, data) VALUES (?, ?, ?)",
                    (version, merged.height, _block(merged)),
                )

    @_guarded
    def prior_results(self, fingerprint: str) -> pl.DataFrame | None:
        """What ``put_prior_results`` stored for the file prior ``fingerprint``, if anything."""
        import polars as pl

        row = self.conn.execute(
            "SELECT data FROM prior_pack WHERE fingerprint = ?", (fingerprint,)
        ).fetchone()
        if row is None:
            return None
        try:
            return _frame_of(row[0])
        except (OSError, pl.exceptions.PolarsError) as exc:
            raise CacheError(
                f"a block of answers stored in the cache at {self.path} is damaged ({exc})",
                hint=_DAMAGED,
            ) from exc

    @_guarded
    def put_prior_results(self, fingerprint: str, version: str, frame: pl.DataFrame) -> None:
        """Store what a file prior did (one transaction); the latest ``_PRIORS`` are kept."""
        with _transaction(self.conn) as conn:
            conn.execute(
                "INSERT OR REPLACE INTO prior_pack (fingerprint, version, at, data) "
                "VALUES (?, ?, ?, ?)",
                (fingerprint, version, utc_stamp(), _block(frame)),
            )
            conn.execute(
                "DELETE FROM prior_pack WHERE version <> ? OR rowid NOT IN "
                "(SELECT rowid FROM prior_pack ORDER BY at DESC, rowid DESC LIMIT ?)",
                (version, _PRIORS),
            )

    @_guarded
    def overrides_among(self, keys: pl.Series) -> dict[str, dict]:
        """The stored decisions of ``keys``, by key (``overrides``, for many keys at once)."""
        import polars as pl

        if self.conn.execute("SELECT NOT EXISTS (SELECT 1 FROM override)").fetchone()[0]:
            return {}
        keys = keys.drop_nulls().unique()
        if not self._scan_rather("override", keys.len()):
            return self.overrides(keys.to_list())
        every = self.overrides()
        stored = pl.Series(list(every), dtype=pl.String)
        wanted = set(stored.filter(stored.is_in(keys.implode())).to_list())
        return {k: d for k, d in every.items() if k in wanted}

    # -- human decisions ------------------------------------------------------
    @_guarded
    def overrides(self, keys: Iterable[str] | None = None) -> dict[str, dict]:
        """Stored decisions, by key (all of them, or those of ``keys``)."""
        cols = ", ".join(_OVERRIDE_COLUMNS)
        if keys is None:
            rows = self.conn.execute(
                f"SELECT {cols} FROM override ORDER BY decided_at, key"
            ).fetchall()
        else:
            rows = list(
                self._in_batches(
                    f"SELECT {cols} FROM override WHERE key IN ({{marks}})", list(keys)
                )
            )
        return {r[0]: dict(zip(_OVERRIDE_COLUMNS, r, strict=True)) for r in rows}

    @_guarded
    def put_overrides(self, decisions: Sequence[Mapping[str, Any]]) -> None:
        """Store decisions in one transaction: a killed run stores all of them or none."""
        cols = ", ".join(_OVERRIDE_COLUMNS)
        marks = ", ".join(f":{c}" for c in _OVERRIDE_COLUMNS)
        updates = ", ".join(f"{c} = excluded.{c}" for c in _OVERRIDE_COLUMNS[1:])
        rows = [{c: d.get(c) for c in _OVERRIDE_COLUMNS} for d in decisions]
        with _transaction(self.conn) as conn:
            conn.executemany(
                f"INSERT INTO override ({cols}) VALUES ({marks}) "
                f"ON CONFLICT(key) DO UPDATE SET {updates}",
                rows,
            )

    @_guarded
    def delete_override(self, key: str) -> bool:
        with _transaction(self.conn) as conn:
            cur = conn.execute("DELETE FROM override WHERE key = ?", (key,))
        return cur.rowcount > 0

    @_guarded
    def put_queue(self, entries: Sequence[Mapping[str, Any]]) -> None:
        rows = [(e["key"], e.get("text"), e.get("exported_at"), e.get("file")) for e in entries]
        with _transaction(self.conn) as conn:
            conn.executemany(
                "INSERT INTO queue (key, text, exported_at, file) VALUES (?, ?, ?, ?) "
                "ON CONFLICT(key) DO UPDATE SET text = excluded.text, "
                "exported_at = excluded.exported_at, file = excluded.file",
                rows,
            )

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
        with _transaction(self.conn) as conn:
            conn.execute(
                "INSERT OR REPLACE INTO remote_answer (provider, key, status, answer, asked_at) "
                "VALUES (?,?,?,?,?)",
                (provider, key, answer.status, answer_to_json(answer), now),
            )
            self._add_usage(provider, requests)

    @_guarded
    def add_remote_used(self, provider: str, requests: int) -> None:
        if requests:
            with _transaction(self.conn):
                self._add_usage(provider, requests)

    def _add_usage(self, provider: str, requests: int) -> None:
        self.conn.execute(
            "INSERT INTO remote_usage (provider, requests) VALUES (?, ?) ON CONFLICT(provider) "
            "DO UPDATE SET requests = requests + excluded.requests",
            (provider, requests),
        )

    @_guarded
    def remote_used(self, provider: str) -> int:
        row = self.conn.execute(
            "SELECT requests FROM remote_usage WHERE provider = ?", (provider,)
        ).fetchone()
        return int(row[0]) if row else 0

    @_guarded
    def record_run(self, output: str, input: str, column: str, remote: str = "") -> None:
        """Remember which column of which input made ``output``, and the remote service used."""
        now = utc_stamp()
        with _transaction(self.conn) as conn:
            conn.execute(
                "INSERT INTO run (output, input, [column], remote, at) VALUES (?, ?, ?, ?, ?) "
                "ON CONFLICT(output) DO UPDATE SET input = excluded.input, "
                "[column] = excluded.[column], remote = excluded.remote, at = excluded.at",
                (output, input, column, remote, now),
            )

    @_guarded
    def run_info(self, output: str) -> dict[str, str] | None:
        """What ``record_run`` stored for ``output``: its input, column and remote service."""
        row = self.conn.execute(
            "SELECT input, [column], remote FROM run WHERE output = ?", (output,)
        ).fetchone()
        if row is None:
            return None
        return {k: str(v or "") for k, v in zip(("input", "column", "remote"), row, strict=True)}

    @_guarded
    def count(self) -> int:
        return int(self.conn.execute("SELECT count(*) FROM resolution").fetchone()[0])

    @_guarded
    def close(self) -> None:
        """Close the file (a damaged one may fail here, as its last pages are written)."""
        self.conn.close()
