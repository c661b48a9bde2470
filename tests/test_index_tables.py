"""The packed tables of the place index and its content hash.

The reference for every in-memory table is the index's own SQL tables, which the
build writes first: the packed name, place and typo tables must give exactly what
the queries give, in the same order (the order weighs in the decision's sums).
"""

from __future__ import annotations

import dataclasses
import random
import shutil
import sqlite3
from pathlib import Path

import pytest

from geonorm.resolve import index as index_module
from geonorm.resolve.build.layout import ORIGINS, content_hash, from_le
from geonorm.resolve.index import QUERIED_LOOKUPS, NameHit, Place, PlaceIndex, load_index
from geonorm.resolve.resolver import Resolver

_JOIN = "SELECT p.*, n.origin FROM name n JOIN place p ON p.id = n.place WHERE n.key = ?"


@pytest.fixture(scope="module")
def index() -> PlaceIndex:
    return load_index()


@pytest.fixture(scope="module")
def db(index: PlaceIndex):
    con = sqlite3.connect(f"file:{index.path}?mode=ro", uri=True)
    yield con
    con.close()


def _queried(db: sqlite3.Connection, key: str) -> tuple[NameHit, ...]:
    return tuple(NameHit(Place(*r[:10]), ORIGINS[r[10]]) for r in db.execute(_JOIN, (key,)))


def test_packed_names_give_what_the_name_table_gives(index, db):
    keys = [k for (k,) in db.execute("SELECT DISTINCT key FROM name ORDER BY key")]
    sample = random.Random(3).sample(keys, 3000)
    # Many hits, other scripts, a dotted acronym, and names the index lacks.
    sample += ["san jose", "paris", "東京", "москва", "l.a.", "dunmarrow", "", "zz zz zz"]
    for key in sample:
        want = _queried(db, key)
        assert index._name_table()[key] == tuple((h.place.id, h.origin) for h in want), key
        assert index._query(key) == want, key
        assert tuple(NameHit(index.place(p), o) for p, o in index._name_table()[key]) == want


def test_packed_places_equal_their_rows(index, db):
    count = db.execute("SELECT count(*) FROM place").fetchone()[0]
    ids = [*random.Random(4).sample(range(1, count + 1), 3000), 1, count]
    index.load_tables()
    columns = index._columns
    assert columns is not None
    for pid in ids:
        row = db.execute("SELECT * FROM place WHERE id = ?", (pid,)).fetchone()
        got = columns.place(pid)
        assert got == Place(*row)
        # Same types too: None stays None, integers stay integers.
        assert [type(v) for v in vars(got).values()] == [type(v) for v in row]


def test_typo_blocks_equal_the_fuzzy_table(index, db):
    for first in ("s", "k", "a", "z"):
        rows = db.execute("SELECT key, place, origin FROM fuzzy WHERE block = ?", (first,))
        by_length: dict[int, list[tuple[str, int, str]]] = {}
        for key, place, origin in rows:
            by_length.setdefault(len(key), []).append((key, place, ORIGINS[origin]))
        for length, spread in ((5, 1), (8, 1), (10, 2)):
            want = [
                row
                for n in range(length - spread, length + spread + 1)
                for row in by_length.get(n, [])
            ]
            keys, targets = index.fuzzy_block(first, length, spread)
            assert list(zip(keys, targets, strict=True)) == [(k, (p, o)) for k, p, o in want]


def test_lookups_before_and_after_the_tables_load_agree(index):
    fresh = PlaceIndex(index.path)
    keys = ["lyon", "perth", "austin", "tx", "scotland", "berlin"] * (QUERIED_LOOKUPS // 3)
    first = [fresh.lookup(f"{k} {i}") for i, k in enumerate(keys)]  # misses, queried
    assert fresh._names is not None  # past QUERIED_LOOKUPS the packed table is in use
    assert first == [index._query(f"{k} {i}") for i, k in enumerate(keys)]
    assert fresh.lookup("lyon") == index._query("lyon")


def test_content_hash_is_stored_and_reproducible(index, db):
    stored = index.meta["content_hash"]
    assert len(stored) == 64
    assert content_hash(db) == stored


@pytest.fixture(scope="module")
def copied(index: PlaceIndex, tmp_path_factory) -> Path:
    """A copy of the index built at another time (same content)."""
    path = tmp_path_factory.mktemp("index") / index.path.name
    shutil.copyfile(index.path, path)
    con = sqlite3.connect(path)
    con.execute("UPDATE meta SET value = '2001-01-01T00:00:00Z' WHERE key = 'built_at'")
    con.commit()
    con.close()
    return path


def test_resolver_version_names_the_content_not_the_build_time(index, copied):
    here = Resolver(index)
    there = Resolver(PlaceIndex(copied))
    assert there.index.meta["built_at"] != here.index.meta["built_at"]
    assert there.version == here.version
    assert index.meta["content_hash"][:12] in here.version
    assert index.meta["built_at"] not in here.version


def test_content_hash_changes_with_the_content(copied):
    con = sqlite3.connect(copied)
    before = content_hash(con)
    con.execute("UPDATE place SET pop = pop + 1 WHERE id = 1")
    assert content_hash(con) != before
    con.rollback()
    con.close()


def test_packed_tables_are_read_whole(index, db):
    for name in ("name_slots", "place_cc", "fuzzy:a"):
        (want,) = db.execute("SELECT data FROM packed WHERE name = ?", (name,)).fetchone()
        assert index._blob(name) == want
    assert index._blob("no such table") == b""


def test_packed_numbers_read_in_place_equal_their_copies(index):
    for typecode, name in (("I", "name_slots"), ("d", "place_lat"), ("q", "place_pop")):
        data = index._blob(name)
        in_place, copied = index_module._numbers(typecode, data), from_le(typecode, data)
        assert list(map(repr, in_place)) == list(map(repr, copied))  # NaN: no coordinates


def test_hits_and_places_are_the_objects_their_constructors_make(index):
    place = index.place(index.lookup("lyon")[0].place.id)
    made = Place(*vars(place).values())
    assert place == made and hash(place) == hash(made) and repr(place) == repr(made)
    assert vars(place) == vars(made)
    hit = index_module._name_hit(place, "alias")
    assert hit == NameHit(place, "alias") and vars(hit) == vars(NameHit(place, "alias"))
    assert [f.name for f in dataclasses.fields(NameHit)] == ["place", "origin"]


def test_countries_and_subdivisions_are_read_when_first_asked_for(index):
    """Opening an index reads neither; a container's place is the same object whichever
    is asked for first, and equal to what another open of the file gives."""
    fr, tx = index.countries["FR"], index.subdivisions["US-TX"]
    columns = index_module._PlaceColumns(index._blob)
    for p in [*index.countries.values(), *index.subdivisions.values()]:
        made = columns.place(p.id)
        assert made == p and [type(v) for v in vars(made).values()] == [
            type(v) for v in vars(p).values()
        ]
    first_place = PlaceIndex(index.path)
    assert "countries" not in vars(first_place) and "subdivisions" not in vars(first_place)
    assert first_place.place(fr.id) == fr
    assert first_place.place(fr.id) is first_place.countries["FR"]
    assert first_place.subdivisions["US-TX"] == tx
    first_lookup = PlaceIndex(index.path)
    hits = first_lookup.lookup("texas")  # the first lookups are queried from SQLite
    assert any(h.place is first_lookup.subdivisions["US-TX"] for h in hits)
    with pytest.raises(AttributeError):
        first_lookup.no_such_table  # noqa: B018


def test_fuzzy_masks_are_the_letters_of_each_name_of_the_block(index, db):
    blocks = [
        r[0].split(":", 1)[1]
        for r in db.execute("SELECT name FROM packed")
        if r[0].startswith("fuzzy:")
    ]
    assert len(blocks) >= 26
    whole = [(first, 100, 100) for first in blocks]  # every name of every block
    for first, length, spread in (("b", 6, 1), ("s", 13, 2), ("q", 3, 1), *whole):
        keys, _ = index.fuzzy_block(first, length, spread)
        masks = index.fuzzy_masks(first, length, spread).tolist()
        assert masks == [index_module.letter_mask(k) for k in keys]
    assert index_module.letter_mask("abba") == index_module.letter_mask("ab") == 0b110 << 32
