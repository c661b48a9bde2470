"""The place index: built once from installed packages, loaded fast from SQLite.

The build (``geonorm.resolve.build``) reads one source per step; this module
reads the compiled file ``index-v{INDEX_VERSION}.sqlite`` in the data directory.
Nothing is downloaded: a missing index is built from the packages.
"""

from __future__ import annotations

import sqlite3
import threading
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from ..errors import PlaceIndexError
from ..paths import data_dir, gazetteer_dir
from .build import build_index
from .build.builder import Progress
from .build.layout import INDEX_VERSION, ORIGINS, default_index_path

__all__ = [
    "INDEX_VERSION",
    "ORIGINS",
    "NameHit",
    "Place",
    "PlaceIndex",
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


class PlaceIndex:
    """Read-only access to a compiled index. Thread-safe; one connection per thread."""

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
        self.countries: dict[str, Place] = {}
        for row in db.execute("SELECT * FROM place WHERE kind IN ('country', 'subdivision')"):
            p = Place(*row)
            self._places[p.id] = p
            if p.kind == "country":
                self.countries[p.cc] = p
        self.subdivisions = {p.sub: p for p in self._places.values() if p.kind == "subdivision"}
        self._fuzzy_blocks: dict[str, dict[int, tuple[list[str], list[tuple[int, str]]]]] = {}
        self._lock = threading.Lock()

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

    def place(self, pid: int) -> Place:
        p = self._places.get(pid)
        if p is None:
            row = self._db().execute("SELECT * FROM place WHERE id=?", (pid,)).fetchone()
            p = Place(*row)
            self._places[pid] = p
        return p

    @lru_cache(maxsize=300_000)  # noqa: B019 - the index lives as long as the process
    def lookup(self, key: str) -> tuple[NameHit, ...]:
        """All places whose folded name equals ``key``, with the name's origin."""
        rows = (
            self._db()
            .execute(
                "SELECT p.*, n.origin FROM name n JOIN place p ON p.id = n.place WHERE n.key = ?",
                (key,),
            )
            .fetchall()
        )
        hits = []
        for row in rows:
            p = self._places.get(row[0]) or Place(*row[:10])
            hits.append(NameHit(p, ORIGINS[row[10]]))
        return tuple(hits)

    @lru_cache(maxsize=4096)  # noqa: B019 - the index lives as long as the process
    def fuzzy_block(
        self, first: str, length: int, spread: int
    ) -> tuple[list[str], list[tuple[int, str]]]:
        """Names typo matching may reach: starting with ``first``, within ``spread`` of ``length``
        characters; with their (place, origin)."""
        with self._lock:
            by_length = self._fuzzy_blocks.get(first)
            if by_length is None:
                rows = (
                    self._db()
                    .execute("SELECT key, place, origin FROM fuzzy WHERE block = ?", (first,))
                    .fetchall()
                )
                by_length = {}
                for key, place, origin in rows:
                    keys, targets = by_length.setdefault(len(key), ([], []))
                    keys.append(key)
                    targets.append((place, ORIGINS[origin]))
                self._fuzzy_blocks[first] = by_length
        keys, targets = [], []
        for n in range(length - spread, length + spread + 1):
            if n in by_length:
                keys.extend(by_length[n][0])
                targets.extend(by_length[n][1])
        return keys, targets

    def __hash__(self) -> int:  # for lru_cache on methods
        return id(self)


_loaded: dict[Path, PlaceIndex] = {}
_load_lock = threading.Lock()


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
