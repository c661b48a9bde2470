"""The cache file: recognised by its marker, never harming another program's database,
set up safely by many runs at once, and failing with a hint that names the cause."""

from __future__ import annotations

import csv
import hashlib
import multiprocessing as mp
import sqlite3

import pytest
from typer.testing import CliRunner

from geonorm.batch.cache import APPLICATION_ID, CACHE_SCHEMA, Cache
from geonorm.cli import app
from geonorm.errors import CacheError
from geonorm.resolve.resolution import Reason, Resolution, Status

runner = CliRunner()


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def _people(path, texts):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows([["location"], *[[t] for t in texts]])


def test_a_new_cache_is_marked_as_ours(tmp_path):
    path = tmp_path / "c.sqlite"
    Cache(path).close()
    with sqlite3.connect(path) as db:
        assert db.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
        assert db.execute("SELECT value FROM geonorm_meta WHERE name = 'layout'").fetchone() == (
            str(CACHE_SCHEMA),
        )
        assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    with Cache(path) as cache:  # opened again: used as it is
        assert cache.count() == 0


def _foreign(path, tables=("CREATE TABLE resolution (id INTEGER PRIMARY KEY, name TEXT)",)):
    db = sqlite3.connect(path)
    for sql in tables:
        db.execute(sql)
    for name in [r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type='table'")]:
        if name == "resolution":
            db.execute("INSERT INTO resolution (id, name) VALUES (1, 'kept')")
    db.execute("PRAGMA user_version = 7")
    db.commit()
    db.close()


@pytest.mark.parametrize(
    "tables",
    [
        # Another program's table that happens to share our table's name.
        ("CREATE TABLE resolution (id INTEGER PRIMARY KEY, name TEXT)",),
        # Our own tables, and one of another program beside them.
        (
            "CREATE TABLE override ([key] TEXT PRIMARY KEY, [text] TEXT, [country] TEXT, "
            "[subdivision] TEXT, [city] TEXT, [lat] FLOAT, [lon] FLOAT, [geonameid] INTEGER, "
            "[not_a_place] INTEGER, [note] TEXT, [decided_at] TEXT, [source] TEXT)",
            "CREATE TABLE invoices (id INTEGER PRIMARY KEY, total REAL)",
        ),
        # An empty database that another program has marked as its own.
        ("PRAGMA application_id = 1234",),
    ],
)
def test_a_foreign_database_is_refused_and_left_unchanged(tmp_path, tables):
    path = tmp_path / "theirs.sqlite"
    _foreign(path, tables)
    before = _digest(path)
    with pytest.raises(CacheError) as err:
        Cache(path)
    assert "is not a geonorm cache" in err.value.message
    assert "left unchanged" in err.value.message
    assert "pass a new file name with `cache`" in err.value.hint
    assert _digest(path) == before  # not one byte changed: tables, user_version, journal mode
    assert {p.name for p in tmp_path.iterdir()} == {"theirs.sqlite"}
    # Through the command line: an error and a hint, exit code 1, and still nothing changed.
    src = tmp_path / "people.csv"
    _people(src, ["Oslo"])
    r = _invoke("clean", src, "-c", "location", "-o", tmp_path / "o.csv", "--cache", path)
    assert r.exit_code == 1 and "is not a geonorm cache" in r.stderr
    assert "Hint: pass a new file name with --cache" in r.stderr
    assert _digest(path) == before


def _earlier_cache(path, *, user_version, resolution_sql, resolution_row):
    """A cache as an earlier release left it: no marker, sqlite-utils' table layout."""
    db = sqlite3.connect(path)
    db.execute("PRAGMA journal_mode=WAL")
    db.execute(resolution_sql)
    db.execute(
        "CREATE TABLE [override] ([key] TEXT PRIMARY KEY, [text] TEXT, [country] TEXT, "
        "[subdivision] TEXT, [city] TEXT, [lat] FLOAT, [lon] FLOAT, [geonameid] INTEGER, "
        "[not_a_place] INTEGER, [note] TEXT, [decided_at] TEXT, [source] TEXT)"
    )
    db.execute(
        "CREATE TABLE [queue] ([key] TEXT PRIMARY KEY, [text] TEXT, [exported_at] TEXT, "
        "[file] TEXT)"
    )
    db.execute(
        "CREATE TABLE [run] ([output] TEXT PRIMARY KEY, [input] TEXT, [column] TEXT, [at] TEXT)"
    )
    db.execute(
        "INSERT INTO override VALUES ('valencia', 'Valencia', 'VE', '', '', NULL, NULL, NULL, "
        "0, 'club is in Venezuela', '2024-01-01T00:00:00Z', 'queue.csv')"
    )
    db.execute("INSERT INTO queue VALUES ('valencia', 'Valencia', '2024-01-01', 'queue.csv')")
    db.execute("INSERT INTO run VALUES ('/data/out.csv', '/data/in.csv', 'location', '2024')")
    db.execute(resolution_row)
    db.execute(f"PRAGMA user_version = {user_version}")
    db.commit()
    db.close()


def test_an_earlier_cache_keeps_its_decisions_and_drops_stale_answers(tmp_path):
    path = tmp_path / "old.sqlite"
    # The first layout: whole answers as JSON in a column "data".
    _earlier_cache(
        path,
        user_version=0,
        resolution_sql="CREATE TABLE [resolution] ([key] TEXT PRIMARY KEY, [version] TEXT, "
        "[status] TEXT, [country] TEXT, [confidence] FLOAT, [reason] TEXT, [data] TEXT, "
        "[created] TEXT, [updated] TEXT)",
        resolution_row="INSERT INTO resolution VALUES ('oslo', '1.0', 'matched', 'NO', 0.9, "
        "'city', '{}', '2024', '2024')",
    )
    with Cache(path) as cache:
        decisions = cache.overrides()
        assert list(decisions) == ["valencia"]
        assert decisions["valencia"]["country"] == "VE"
        assert decisions["valencia"]["note"] == "club is in Venezuela"
        assert cache.queued(["valencia"]) == {"valencia"}
        assert cache.run_info("/data/out.csv") == {
            "input": "/data/in.csv",
            "column": "location",
            "remote": "",
        }
        assert cache.count() == 0  # answers of the old layout are made again
        cache.put_many({"oslo": Resolution(Status.MATCHED, Reason.CITY, "NO")}, "v")
        assert cache.get_many(["oslo"], "v")["oslo"].country == "NO"
    with sqlite3.connect(path) as db:
        assert db.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID


def test_an_earlier_cache_of_the_last_layout_keeps_its_answers(tmp_path):
    path = tmp_path / "old.sqlite"
    _earlier_cache(
        path,
        user_version=2,
        resolution_sql="CREATE TABLE [resolution] ([key] TEXT PRIMARY KEY, [version] TEXT, "
        "[status] TEXT, [reason] TEXT, [country] TEXT, [subdivision] TEXT, [city] TEXT, "
        "[lat] FLOAT, [lon] FLOAT, [geonameid] INTEGER, [confidence] FLOAT, [score] FLOAT, "
        "[detail] TEXT, [created] TEXT, [updated] TEXT)",
        resolution_row="INSERT INTO resolution VALUES ('oslo', 'v', 'matched', 'city', 'NO', "
        "'', 'Oslo', 59.9, 10.7, 3143244, 0.9, 0.9, "
        "'{\"candidates\": [], \"evidence\": {\"NO\": 1.0}}', '2024', '2024')",
    )
    with Cache(path) as cache:
        assert cache.get_many(["oslo"], "v")["oslo"].city == "Oslo"
        assert list(cache.overrides()) == ["valencia"]


def _open_many(paths, barrier, results) -> None:
    barrier.wait()
    for path in paths:
        try:
            Cache(path).close()
            results.put("ok")
        except CacheError as exc:
            results.put(f"{exc.message} | {exc.hint}")


def test_many_runs_opening_one_new_file_at_once_all_succeed(tmp_path):
    """16 processes open the same new files at the same moment (six files in a row, so
    that they race on each); before, some failed with "database is locked" or "table
    already exists", and were told the file was damaged."""
    ctx = mp.get_context("fork")
    paths = [str(tmp_path / f"new{i}.sqlite") for i in range(6)]
    barrier, results = ctx.Barrier(16), ctx.Queue()
    procs = [ctx.Process(target=_open_many, args=(paths, barrier, results)) for _ in range(16)]
    for p in procs:
        p.start()
    got = [results.get(timeout=120) for _ in range(16 * len(paths))]
    for p in procs:
        p.join(timeout=60)
    assert [g for g in got if g != "ok"] == []
    for path in paths:
        with sqlite3.connect(path) as db:
            assert db.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID


def test_a_locked_cache_says_another_run_holds_it(tmp_path):
    path = tmp_path / "busy.sqlite"
    holder = sqlite3.connect(path, isolation_level=None)
    holder.execute("BEGIN EXCLUSIVE")  # another program writing, for longer than we wait
    try:
        with pytest.raises(CacheError) as err:
            Cache(path, timeout=0.2)
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert "database is locked" in err.value.message
    assert "another run is using this cache" in err.value.hint
    assert "damaged" not in err.value.hint
    with Cache(path) as cache:  # free again: it opens
        assert cache.count() == 0


def _damaged(path) -> None:
    """A cache whose data pages are overwritten: SQLite reads it as malformed."""
    with Cache(path) as cache:
        cache.put_many(
            {f"town {i}": Resolution(Status.MATCHED, Reason.CITY, "FR") for i in range(3000)}, "v"
        )
    with sqlite3.connect(path) as db:
        db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    size = path.stat().st_size
    with open(path, "r+b") as fh:
        for page in range(2, size // 4096):
            fh.seek(page * 4096)
            fh.write(bytes(range(256)) * 16)


def test_a_damaged_cache_gives_an_error_and_a_hint(tmp_path):
    path = tmp_path / "damaged.sqlite"
    _damaged(path)
    src = tmp_path / "people.csv"
    _people(src, [f"town {i}" for i in range(40)])
    for args in (
        ("clean", src, "-c", "location", "-o", tmp_path / "o.csv", "--workers", 1),
        ("lookup", "town 1", "town 2"),
        ("review", "list"),
    ):
        r = _invoke(*args, "--cache", path)
        assert r.exit_code == 1, (args, r.output)
        assert isinstance(r.exception, SystemExit)  # no traceback
        assert r.stderr.startswith("Error: ")
        assert "Hint: the cache file is damaged" in r.stderr


def test_a_file_that_is_no_database_is_named_so(tmp_path):
    path = tmp_path / "notes.sqlite"
    path.write_text("shopping list: bread, milk\n" * 200)
    before = _digest(path)
    with pytest.raises(CacheError, match="cannot open the cache") as err:
        Cache(path)
    assert "not an SQLite database" in err.value.hint
    assert _digest(path) == before


def test_a_stored_answer_with_damaged_fields_is_an_error(tmp_path):
    with Cache(tmp_path / "c.sqlite") as cache:
        cache.put_many({"oslo": Resolution(Status.MATCHED, Reason.AMBIGUOUS, "NO")}, "v")
        cache.conn.execute("UPDATE resolution SET detail = '{not json'")
        with pytest.raises(CacheError, match="is damaged") as err:
            cache.get_many(["oslo"], "v")
    assert "the cache file is damaged" in err.value.hint


def test_a_failing_set_of_decisions_stores_none_of_them(tmp_path):
    """The decisions of one file go in together: one bad row leaves the store as it was."""
    decisions = [
        {"key": f"k{i}", "text": f"T{i}", "country": "FR", "decided_at": "2024", "source": "q"}
        for i in range(450)
    ]
    decisions[400]["note"] = object()  # SQLite cannot store it: the write fails there
    with Cache(tmp_path / "c.sqlite") as cache:
        with pytest.raises(CacheError):
            cache.put_overrides(decisions)
        assert cache.overrides() == {}
        del decisions[400]["note"]
        cache.put_overrides(decisions)
        assert len(cache.overrides()) == 450
