"""The layout of the compiled index file, shared by the build and the reader."""

from __future__ import annotations

import sqlite3
import struct
import sys
import zlib
from array import array
from collections.abc import Iterable
from itertools import accumulate, groupby
from pathlib import Path

from ...paths import data_dir

__all__ = [
    "CONTENT_TABLES",
    "INDEX_VERSION",
    "KINDS",
    "NO_GID",
    "ORIGINS",
    "ORIGIN_ID",
    "SCHEMA",
    "StringColumn",
    "content_hash",
    "default_index_path",
    "from_le",
    "hit_code",
    "key_hash",
    "pack_tables",
    "unpack_fuzzy",
    "unpack_hit",
    "unpack_hits",
]

INDEX_VERSION = 4

# Name origins, strongest first. Stored as small integers.
ORIGINS = (
    "name",
    "alias",
    "code2",
    "code3",
    "postal",
    "sub_code",
    "alt",
    "translation",
    "lower_sub",
    "adjective",
    "region",
    "short",
)
ORIGIN_ID = {o: i for i, o in enumerate(ORIGINS)}

# The statements keep their old spacing: SQLite stores their text in the file.
SCHEMA = """
        PRAGMA journal_mode=OFF; PRAGMA synchronous=OFF;
        CREATE TABLE place(id INTEGER PRIMARY KEY, kind TEXT, cc TEXT, sub TEXT, name TEXT,
                           lat REAL, lon REAL, pop INTEGER, gid INTEGER, fame INTEGER);
        CREATE TABLE name(key TEXT, place INTEGER, origin INTEGER);
        CREATE TABLE fuzzy(block TEXT, key TEXT, place INTEGER, origin INTEGER);
        CREATE TABLE nonplace(key TEXT PRIMARY KEY, kind TEXT);
        CREATE TABLE noise(phrase TEXT, position TEXT);
        CREATE TABLE postcode(prefix TEXT PRIMARY KEY, place INTEGER);
        CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT);
        CREATE TABLE packed(name TEXT PRIMARY KEY, data BLOB);
        """


def default_index_path() -> Path:
    return data_dir() / f"index-v{INDEX_VERSION}.sqlite"


# -- the packed tables --------------------------------------------------------
# The name, place and fuzzy tables again, as flat byte strings in the ``packed``
# table: the reader loads them in a few milliseconds and looks names up in memory,
# without a query per name. Written by the build from the SQL tables it has just
# written (so both always agree), read by ``index.PlaceIndex``. Numbers are
# little-endian whatever the machine, so the file can be copied between hosts.
KINDS = ("country", "subdivision", "city", "area", "region")
_ORIGIN_BITS = 5  # origins fit in 5 bits: a name hit is (place id << 5) | origin
NO_GID = -1  # a place without a GeoNames id
_EMPTY = 0  # an empty slot of the name hash table (records start at offset 1)


def _le(values: array) -> bytes:
    if sys.byteorder == "big":
        values = array(values.typecode, values)
        values.byteswap()
    return values.tobytes()


def from_le(typecode: str, data: bytes) -> array:
    values = array(typecode)
    values.frombytes(data)
    if sys.byteorder == "big":
        values.byteswap()
    return values


def _strings(values: Iterable[str]) -> bytes:
    """Strings as one UTF-8 byte string after a header of their end offsets."""
    encoded = [v.encode("utf-8") for v in values]
    ends = array("I", accumulate(len(e) for e in encoded))
    return struct.pack("<I", len(encoded)) + _le(ends) + b"".join(encoded)


class StringColumn:
    """The strings written by ``_strings``, decoded one at a time."""

    def __init__(self, data: bytes) -> None:
        (n,) = struct.unpack_from("<I", data)
        self.ends = from_le("I", data[4 : 4 + 4 * n])
        self.text = data[4 + 4 * n :]

    def __getitem__(self, i: int) -> str:
        start = self.ends[i - 1] if i else 0
        return self.text[start : self.ends[i]].decode("utf-8")

    def __len__(self) -> int:
        return len(self.ends)


def key_hash(key: bytes) -> int:
    """The slot hash of a folded name (CRC-32: the same in every process and on every host)."""
    return zlib.crc32(key)


def pack_tables(db: sqlite3.Connection) -> dict[str, bytes]:
    """The packed forms of the ``place``, ``name`` and ``fuzzy`` tables of ``db``."""
    packed = _pack_places(db)
    packed.update(_pack_names(db))
    packed.update(_pack_fuzzy(db))
    return packed


def _pack_places(db: sqlite3.Connection) -> dict[str, bytes]:
    rows = db.execute("SELECT * FROM place ORDER BY id").fetchall()
    if [r[0] for r in rows] != list(range(1, len(rows) + 1)):
        raise ValueError("place ids must run from 1 without gaps")
    nan = float("nan")
    return {
        "place_kind": bytes(KINDS.index(r[1]) for r in rows),
        "place_cc": _strings(r[2] for r in rows),
        "place_sub": _strings(r[3] for r in rows),
        "place_name": _strings(r[4] for r in rows),
        "place_lat": _le(array("d", (nan if r[5] is None else r[5] for r in rows))),
        "place_lon": _le(array("d", (nan if r[6] is None else r[6] for r in rows))),
        "place_pop": _le(array("q", (r[7] for r in rows))),
        "place_gid": _le(array("q", (NO_GID if r[8] is None else r[8] for r in rows))),
        "place_fame": _le(array("q", (r[9] for r in rows))),
    }


def _hits(rows: Iterable[tuple[int, int]]) -> bytes:
    codes = array("I", (hit_code(place, origin) for place, origin in rows))
    return struct.pack("<H", len(codes)) + _le(codes)


def _pack_names(db: sqlite3.Connection) -> dict[str, bytes]:
    """An open-addressing hash table: slots of record offsets, and records of
    (key length, key, hit count, hits), hits in the order the SQL table gives them."""
    records = bytearray(b"\0")  # offset 0 is the empty slot
    offsets: list[tuple[bytes, int]] = []
    rows = db.execute("SELECT key, place, origin FROM name ORDER BY key, rowid")
    for key, group in groupby(rows, key=lambda r: r[0]):
        encoded = key.encode("utf-8")
        offsets.append((encoded, len(records)))
        records += struct.pack("<H", len(encoded)) + encoded + _hits((r[1], r[2]) for r in group)
    size = 1 << max(4, (2 * len(offsets)).bit_length())  # at most half full
    slots = array("I", [_EMPTY]) * size
    for encoded, offset in offsets:
        i = key_hash(encoded) & (size - 1)
        while slots[i] != _EMPTY:
            i = (i + 1) & (size - 1)
        slots[i] = offset
    return {"name_slots": _le(slots), "name_records": bytes(records)}


def unpack_hits(records: bytes, at: int) -> tuple[tuple[int, str], ...]:
    """The (place id, origin) pairs of the record's hits starting at ``at``."""
    (n,) = struct.unpack_from("<H", records, at)
    codes = struct.unpack_from(f"<{n}I", records, at + 2)
    mask = (1 << _ORIGIN_BITS) - 1
    return tuple((c >> _ORIGIN_BITS, ORIGINS[c & mask]) for c in codes)


def _pack_fuzzy(db: sqlite3.Connection) -> dict[str, bytes]:
    """One entry per block (first letter): how many keys, their hits, then the keys
    separated by NUL (which no folded name holds). Keys are ordered by length, and
    within a length in the order of the SQL table, so that the names of a range of
    lengths are one slice."""
    out = {}
    rows = db.execute("SELECT block, key, place, origin FROM fuzzy ORDER BY block, rowid")
    for block, group in groupby(rows, key=lambda r: r[0]):
        entries = sorted(group, key=lambda r: len(r[1]))  # stable: table order kept
        codes = array("I", (hit_code(r[2], r[3]) for r in entries))
        keys = "\0".join(r[1] for r in entries).encode("utf-8")
        out[f"fuzzy:{block}"] = struct.pack("<I", len(entries)) + _le(codes) + keys
    return out


def unpack_fuzzy(data: bytes) -> tuple[list[str], array]:
    """The keys of one packed fuzzy block (by length) and their hit codes."""
    (n,) = struct.unpack_from("<I", data)
    codes = from_le("I", data[4 : 4 + 4 * n])
    keys = data[4 + 4 * n :].decode("utf-8").split("\0") if n else []
    return keys, codes


def hit_code(place: int, origin: int) -> int:
    """A name hit in one number: the place id and the origin's number."""
    return (place << _ORIGIN_BITS) | origin


def unpack_hit(code: int) -> tuple[int, str]:
    """The (place id, origin) of a hit code."""
    return code >> _ORIGIN_BITS, ORIGINS[code & ((1 << _ORIGIN_BITS) - 1)]


def content_hash(db: sqlite3.Connection) -> str:
    """A hash of everything the index holds (not when or how fast it was built):
    the same code and the same source packages give the same hash on every host."""
    import hashlib  # only the build needs it

    h = hashlib.sha256(f"index {INDEX_VERSION}\n".encode())
    for table in CONTENT_TABLES:
        h.update(f"table {table}\n".encode())
        for row in db.execute(f"SELECT * FROM {table} ORDER BY rowid"):
            h.update(repr(row).encode("utf-8", "surrogatepass"))
            h.update(b"\n")
    return h.hexdigest()


# The tables whose rows make the index's content (``packed`` is derived from them).
CONTENT_TABLES = ("place", "name", "fuzzy", "nonplace", "noise", "postcode")
