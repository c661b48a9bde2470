"""The demo: clean the invented member list of a backyard weather-station network."""

from __future__ import annotations

import csv
from collections import Counter
from collections.abc import Callable
from importlib import resources
from pathlib import Path

from .batch import clean_file
from .cache import Cache
from .errors import InputError
from .review import export_queue

__all__ = ["demo_file", "run_demo"]


def demo_file() -> Path:
    packaged = Path(str(resources.files("geonorm"))) / "_demo" / "members.csv"
    if packaged.exists():
        return packaged
    source = Path(__file__).resolve().parent.parent / "demo_data" / "members.csv"
    if source.exists():
        return source
    raise InputError("the demo member list is missing from this installation",
                     hint="reinstall geonorm, or run demo_data/generate.py in the source tree")


def run_demo(out_dir: Path, progress: Callable[[str], None] | None = None) -> dict:
    """Clean the demo file into ``out_dir``; return the summary and file paths."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    cleaned = out_dir / "members_clean.csv"
    cache = Cache(out_dir / "cache.sqlite")
    summary = clean_file(demo_file(), "location", cleaned, cache=cache, progress=progress)
    queue = out_dir / "review_queue.csv"
    queued = export_queue(cleaned, queue, column="location", top=200, cache=cache)
    tally: Counter[str] = Counter()
    with open(cleaned, encoding="utf-8", newline="") as fh:
        for row in csv.DictReader(fh):
            if row["geo_status"] == "matched":
                tally[row["geo_country"]] += 1
    return {"summary": summary, "top_countries": tally.most_common(10), "queued": queued,
            "files": {"cleaned file": cleaned, "review queue (top 200)": queue, "cache": out_dir / "cache.sqlite"}}
