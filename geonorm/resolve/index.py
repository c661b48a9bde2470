"""The place index: built once from installed packages, loaded fast from SQLite.

The build (``geonorm.resolve.build``) reads one source per step; this module
reads the compiled file ``index-v{INDEX_VERSION}.sqlite`` in the data directory.
Nothing is downloaded: a missing index is built from the packages.
"""

from __future__ import annotations

import sqlite3
import sys
import threading
from array import array
from bisect import bisect_left, bisect_right
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import PlaceIndexError
from ..paths import data_dir, gazetteer_dir
from .build.layout import (
    INDEX_VERSION,
    KINDS,
    NO_GID,
    ORIGINS,
    StringColumn,
    default_index_path,
    from_le,
    key_hash,
    unpack_fuzzy,
    unpack_hit,
    unpack_hits,
)

if TYPE_CHECKING:
    import numpy as np
    from numpy.typing import NDArray

    from .build.builder import Progress

__all__ = [
    "INDEX_VERSION",
    "ORIGINS",
    "NameHit",
    "Place",
    "PlaceIndex",
    "TypoTargets",
    "build_index",
    "data_dir",
    "default_index_path",
    "gazetteer_dir",
    "load_index",
]


@dataclass(frozen=True)
class Place:
    id: int
    kind: str  # country | subdivision | city | area | region
    cc: str  # ISO 3166-1 alpha-2 ('' for regions)
    sub: str  # first-level ISO 3166-2 code or ''
    name: str
    lat: float | None
    lon: float | None
    pop: int
    gid: int | None  # GeoNames id
    fame: int = 0  # how many alternate names GeoNames knows (a proxy for how widely it is known)


@dataclass(frozen=True)
class NameHit:
    place: Place
    origin: str


_new = object.__new__
_set = object.__setattr__


def _name_hit(place: Place, origin: str) -> NameHit:
    """``NameHit(place, origin)``, made faster than by the frozen dataclass's ``__init__``
    (lookups make many); the same object."""
    hit = _new(NameHit)
    _set(hit, "place", place)
    _set(hit, "origin", origin)
    return hit


class PlaceIndex:
    """Read-only access to a compiled index. Thread-safe; one connection per thread.

    Hashed by identity (``object.__hash__``, no ``__eq__``), for ``lru_cache`` on methods.
    """

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        if not self.path.exists():
            raise PlaceIndexError(
                f"no place index at {self.path}", hint="run: geonorm gazetteer build"
            )
        self._local = threading.local()
        db = self._db()
        try:
            self.meta = dict(db.execute("SELECT key, value FROM meta").fetchall())
        except sqlite3.DatabaseError as exc:
            raise PlaceIndexError(
                f"the place index at {self.path} is unreadable ({exc})",
                hint="rebuild it: geonorm gazetteer build",
            ) from exc
        if self.meta.get("index_version") != str(INDEX_VERSION):
            raise PlaceIndexError(
                f"the place index at {self.path} has version "
                f"{self.meta.get('index_version')}, this geonorm needs {INDEX_VERSION}",
                hint="rebuild it: geonorm gazetteer build",
            )
        self.nonplace = dict(db.execute("SELECT key, kind FROM nonplace").fetchall())
        self.noise = db.execute("SELECT phrase, position FROM noise").fetchall()
        self.postcodes = dict(db.execute("SELECT prefix, place FROM postcode").fetchall())
        self._places: dict[int, Place] = {}
        # Per first letter: the keys by length, their lengths, their hit codes.
        self._fuzzy_blocks: dict[str, tuple[list[str], list[int], array]] = {}
        self._fuzzy_masks: dict[str, NDArray[np.uint64]] = {}
        self._lock = threading.Lock()
        self._names: _NameTable | None = None
        self._lookups = 0
        self._columns: _PlaceColumns | None = None
        # The names looked up lately, by name (a string key: hashed once, kept untracked
        # by the garbage collector).
        self._hits = lru_cache(maxsize=100_000)(self._find)

    # Countries and subdivisions (by code), read when first asked for (``__getattr__``):
    # a run whose answers are all stored never needs them.
    countries: dict[str, Place]
    subdivisions: dict[str, Place]

    def __getattr__(self, name: str) -> Any:
        if name not in ("countries", "subdivisions"):
            raise AttributeError(name)
        with self._lock:
            if "subdivisions" not in self.__dict__:
                self._read_containers()
        return self.__dict__[name]

    def _read_containers(self) -> None:
        """The countries and subdivisions, each also the place its id stands for (the
        object ``place`` gave, if it gave one already: the packed columns and the table
        hold the same values, tests/test_index_tables.py checks it)."""
        containers = "SELECT * FROM place WHERE kind IN ('country', 'subdivision') ORDER BY id"
        countries, subdivisions = {}, {}
        for row in self._db().execute(containers):
            p = self._places.setdefault(row[0], Place(*row))
            if p.kind == "country":
                countries[p.cc] = p
            else:
                subdivisions[p.sub] = p
        self.countries = countries
        self.subdivisions = subdivisions  # last: its presence says both are read

    def _db(self) -> sqlite3.Connection:
        db = getattr(self._local, "db", None)
        if db is None:
            db = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, check_same_thread=False)
            self._local.db = db
        return db

    def reopen(self) -> None:
        """Forget connections inherited from a parent process (call after fork)."""
        self._local = threading.local()
        self._lock = threading.Lock()

    def load_tables(self) -> None:
        """Load the packed name, place and typo tables now, not at the first lookups (a
        pool forked afterwards shares them)."""
        self._name_table()
        self._place_columns()
        self.subdivisions  # noqa: B018 - and the countries with them
        self._lookups = QUERIED_LOOKUPS
        blocks = self._db().execute("SELECT name FROM packed WHERE name LIKE 'fuzzy:%'")
        for (name,) in blocks.fetchall():
            self.fuzzy_masks(name.split(":", 1)[1], 0, 0)  # the block, and its letter sets

    def _blob(self, name: str) -> bytes:
        """One of the packed tables (``build.layout``), or b'' when there is none."""
        db = self._db()
        row = db.execute("SELECT rowid FROM packed WHERE name = ?", (name,)).fetchone()
        if row is None:
            return b""
        if hasattr(db, "blobopen"):  # Python 3.11+: read straight into one byte string
            with db.blobopen("packed", "data", row[0], readonly=True) as blob:
                return blob.read()
        return db.execute("SELECT data FROM packed WHERE rowid = ?", row).fetchone()[0]

    def _name_table(self) -> _NameTable:
        names = self._names
        if names is None:
            with self._lock:
                if self._names is None:
                    self._names = _NameTable(self._blob("name_slots"), self._blob("name_records"))
                names = self._names
        return names

    def place(self, pid: int) -> Place:
        p = self._places.get(pid)
        if p is None:
            p = self._places.setdefault(pid, self._place_columns().place(pid))
        return p

    def _place_columns(self) -> _PlaceColumns:
        columns = self._columns
        if columns is None:
            with self._lock:
                if self._columns is None:
                    self._columns = _PlaceColumns(self._blob)
                columns = self._columns
        return columns

    def lookup(self, key: str) -> tuple[NameHit, ...]:
        """All places whose folded name equals ``key``, with the name's origin (in the
        order of the name table: by place id).

        The first ``QUERIED_LOOKUPS`` names are queried from SQLite, so that a process
        that looks up a few names never loads the packed tables; later ones are read
        from them in memory. Both give the same answer.
        """
        return self._hits(key)

    def _find(self, key: str) -> tuple[NameHit, ...]:
        """``lookup``'s work, for a name not looked up lately."""
        self._lookups += 1
        if self._lookups <= QUERIED_LOOKUPS:
            return self._query(key)
        found = self._name_table()[key]
        if not found:
            return ()
        place = self.place
        return tuple([_name_hit(place(pid), origin) for pid, origin in found])

    def _query(self, key: str) -> tuple[NameHit, ...]:
        rows = (
            self._db()
            .execute(
                "SELECT p.*, n.origin FROM name n JOIN place p ON p.id = n.place WHERE n.key = ?",
                (key,),
            )
            .fetchall()
        )
        places = self._places
        self.subdivisions  # noqa: B018 - read first: a container is the one object for it
        return tuple(NameHit(places.get(r[0]) or Place(*r[:10]), ORIGINS[r[10]]) for r in rows)

    @lru_cache(maxsize=4096)  # noqa: B019 - the index lives as long as the process
    def fuzzy_block(self, first: str, length: int, spread: int) -> tuple[list[str], TypoTargets]:
        """Names typo matching may reach: starting with ``first``, within ``spread`` of ``length``
        characters; with their (place, origin)."""
        keys, lengths, codes = self._typo_block(first)
        start = bisect_left(lengths, length - spread)
        end = bisect_right(lengths, length + spread)
        return keys[start:end], TypoTargets(codes[start:end])

    @lru_cache(maxsize=4096)  # noqa: B019 - the index lives as long as the process
    def fuzzy_masks(self, first: str, length: int, spread: int) -> NDArray[np.uint64]:
        """The ``letter_mask`` of each name of ``fuzzy_block(first, length, spread)``, in
        its order (numpy is imported, and a block's masks made, when first asked for)."""
        keys, lengths, _ = self._typo_block(first)
        masks = self._fuzzy_masks.get(first)
        if masks is None:  # two threads may both make it: the same values
            masks = self._fuzzy_masks.setdefault(first, _letter_masks(keys, lengths))
        start = bisect_left(lengths, length - spread)
        end = bisect_right(lengths, length + spread)
        return masks[start:end]

    def _typo_block(self, first: str) -> tuple[list[str], list[int], array]:
        """The names starting with ``first`` by length, their lengths and hit codes."""
        with self._lock:
            block = self._fuzzy_blocks.get(first)
            if block is None:
                blob = self._blob(f"fuzzy:{first}")
                keys, codes = unpack_fuzzy(blob) if blob else ([], array("I"))
                block = self._fuzzy_blocks[first] = (keys, [len(k) for k in keys], codes)
        return block


def _letter_masks(keys: list[str], lengths: list[int]) -> NDArray[np.uint64]:
    """``letter_mask`` of each of ``keys`` (sorted by their ``lengths``), computed in numpy
    a length at a time: the names of one length are one array of code points."""
    import numpy as np

    masks = np.zeros(len(keys), dtype=np.uint64)
    one, start = np.uint64(1), 0
    while start < len(keys):
        n = lengths[start]
        end = bisect_right(lengths, n, lo=start)
        if n:
            points = np.array(keys[start:end], dtype=f"<U{n}").view(np.uint32)
            bits = np.left_shift(one, (points.reshape(end - start, n) & 63).astype(np.uint64))
            masks[start:end] = np.bitwise_or.reduce(bits, axis=1)
        start = end
    return masks


def letter_mask(text: str) -> int:
    """The letters of ``text`` as a set of 64 bits (a character's code point modulo 64).

    One edit changes the set by at most two bits (a substitution takes one letter out
    and puts one in; an insertion or deletion one; swapping neighbours none), so texts
    within ``k`` edits differ in at most ``2k`` bits: a test any typo match passes.
    """
    mask = 0
    for c in text:
        mask |= 1 << (ord(c) & 63)
    return mask


class TypoTargets:
    """The (place id, origin) of each name of a typo block, decoded when asked for."""

    def __init__(self, codes: array) -> None:
        self.codes = codes

    def __getitem__(self, i: int) -> tuple[int, str]:
        return unpack_hit(self.codes[i])

    def __len__(self) -> int:
        return len(self.codes)

    def __iter__(self) -> Iterator[tuple[int, str]]:
        return map(unpack_hit, self.codes)


class _NameTable:
    """The packed name table (``build.layout``): folded name → (place id, origin) pairs,
    an open-addressing hash table over two byte strings, looked up without a query."""

    def __init__(self, slots: bytes, records: bytes) -> None:
        self.slots = _numbers("I", slots)
        self.mask = len(self.slots) - 1
        self.records = records

    def __getitem__(self, key: str) -> tuple[tuple[int, str], ...]:
        encoded = key.encode("utf-8", "surrogatepass")
        records, slots, mask, n = self.records, self.slots, self.mask, len(encoded)
        if not slots:
            return ()
        i = key_hash(encoded) & mask
        while at := slots[i]:
            length = records[at] | records[at + 1] << 8
            if length == n and records[at + 2 : at + 2 + n] == encoded:
                return unpack_hits(records, at + 2 + n)
            i = (i + 1) & mask
        return ()


class _PlaceColumns:
    """The packed place table (``build.layout``): one column per field, a place built
    when first asked for."""

    def __init__(self, blob: Callable[[str], bytes]) -> None:
        self.kind = blob("place_kind")
        self.cc = StringColumn(blob("place_cc"))
        self.sub = StringColumn(blob("place_sub"))
        self.name = StringColumn(blob("place_name"))
        self.lat = _numbers("d", blob("place_lat"))
        self.lon = _numbers("d", blob("place_lon"))
        self.pop = _numbers("q", blob("place_pop"))
        self.gid = _numbers("q", blob("place_gid"))
        self.fame = _numbers("q", blob("place_fame"))

    def place(self, pid: int) -> Place:
        i = pid - 1
        if not 0 <= i < len(self.kind):
            raise PlaceIndexError(
                f"the place index has no place {pid}", hint="rebuild it: geonorm gazetteer build"
            )
        lat, lon, gid = self.lat[i], self.lon[i], self.gid[i]
        cc, sub, name = self.cc, self.sub, self.name  # a string: its bytes between two ends
        # Place(...), made faster than by its __init__ (see ``_name_hit``).
        place = _new(Place)
        _set(place, "id", pid)
        _set(place, "kind", KINDS[self.kind[i]])
        _set(place, "cc", cc.text[cc.ends[i - 1] if i else 0 : cc.ends[i]].decode())
        _set(place, "sub", sub.text[sub.ends[i - 1] if i else 0 : sub.ends[i]].decode())
        _set(place, "name", name.text[name.ends[i - 1] if i else 0 : name.ends[i]].decode())
        _set(place, "lat", None if lat != lat else lat)  # NaN: no coordinates
        _set(place, "lon", None if lon != lon else lon)
        _set(place, "pop", self.pop[i])
        _set(place, "gid", None if gid == NO_GID else gid)
        _set(place, "fame", self.fame[i])
        return place


def _numbers(typecode: str, data: bytes) -> Sequence[Any]:
    """A packed column of numbers (little-endian): read in place where this machine is
    little-endian too, else copied and swapped (``from_le``)."""
    if sys.byteorder == "little":
        return memoryview(data).cast(typecode)  # type: ignore[call-overload]  # a str code
    return from_le(typecode, data)


# Names looked up with a query before the packed name table is loaded (which takes
# a few tens of milliseconds): enough for a single lookup from the command line.
QUERIED_LOOKUPS = 64

_loaded: dict[Path, PlaceIndex] = {}
_load_lock = threading.Lock()


def build_index(path: Path | None = None, progress: Progress | None = None) -> Path:
    """Compile the place index from installed packages into ``path`` (``build.steps``,
    imported here when called: reading an index never loads the builder)."""
    from .build.steps import build_index as build

    return build(path, progress)


def load_index(path: Path | None = None, progress: Progress | None = None) -> PlaceIndex:
    """Open the index, building it first if it does not exist yet."""
    path = Path(path or default_index_path())
    with _load_lock:
        idx = _loaded.get(path)
        if idx is None:
            if not path.exists():
                (progress or (lambda m: None))(
                    f"first use: building the place index at {path} (about a minute, once)"
                )
                build_index(path, progress)
            idx = PlaceIndex(path)
            _loaded[path] = idx
        return idx
