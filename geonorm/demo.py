"""The demo: the whole path on the invented member list of a backyard weather-station network.

clean (with its run report page) → review queue → per-country tally (and by
station kind) → map.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path
from typing import Any

from .batch.cache import Cache
from .batch.clean import clean_file
from .errors import InputError
from .figures.mapping import write_map
from .figures.report import report_html
from .figures.tally import tally_file, write_tally
from .progress import Progress, no_progress
from .review.queue import export_queue

__all__ = ["demo_file", "run_demo"]


def demo_file() -> Path:
    packaged = Path(str(resources.files("geonorm"))) / "_demo" / "members.csv"
    if packaged.exists():
        return packaged
    source = Path(__file__).resolve().parents[1] / "demo_data" / "members.csv"
    if source.exists():
        return source
    raise InputError(
        "the demo member list is missing from this installation",
        hint="reinstall geonorm, or run demo_data/generate.py in the source tree",
    )


def run_demo(out_dir: Path, progress: Progress = no_progress) -> dict[str, Any]:
    """Clean the demo file into ``out_dir``; return the summary and file paths."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    cleaned = out_dir / "members_clean.csv"
    report = out_dir / "run_report.html"
    with Cache(out_dir / "cache.sqlite") as cache:
        summary = clean_file(
            demo_file(),
            "location",
            cleaned,
            cache=cache,
            progress=progress,
            report=report,
            report_page=report_html,
        )
        queue = out_dir / "review_queue.csv"
        queued = export_queue(cleaned, queue, column="location", top=200, cache=cache)
    countries = tally_file(cleaned)
    per_country = out_dir / "countries.csv"
    write_tally(countries, per_country, by=False)
    by_kind = tally_file(cleaned, by="station_kind")
    per_kind = out_dir / "countries_by_station_kind.csv"
    write_tally(by_kind, per_kind, by=True)
    map_svg = write_map(
        per_country,
        "shrunk_per_million",
        out_dir / "members_per_million.svg",
        title="Backyard Weather Network members per million people (shrunk)",
    )
    map_html = write_map(
        per_country,
        "shrunk_per_million",
        out_dir / "members_per_million.html",
        title="Backyard Weather Network members per million people (shrunk)",
    )
    top = [(r["country"], r["count"]) for r in countries.rows[:10]]
    return {
        "summary": summary,
        "top_countries": top,
        "queued": queued,
        "tally": countries,
        "report": report,
        "files": {
            "cleaned file": cleaned,
            "run report (HTML)": report,
            "review queue (top 200)": queue,
            "per-country figures": per_country,
            "per country and station kind": per_kind,
            "map (SVG)": map_svg,
            "map (HTML)": map_html,
            "cache": out_dir / "cache.sqlite",
        },
    }
