"""Clean a whole file: distinct strings first, the answer pipeline, join back.

Pass 1 streams the location column and counts its distinct values. Their keys
go through the answer pipeline (``answers.resolve_keys``: cache, cascade for
the misses in chunks committed as they finish, people's decisions, the file
prior, the optional remote stage, the accept threshold). Pass 2 streams the
file again, appends the geo columns and writes a temporary file that is
renamed at the end. The output of an interrupted-and-resumed run is
byte-identical to an uninterrupted one.
"""

from __future__ import annotations

import json
import math
import os
import time
from collections import Counter
from collections.abc import Iterable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Protocol

from ..errors import InputError
from ..progress import Progress, no_progress, note
from ..resolve.resolution import Status
from ..resolve.resolver import Resolver
from ..version import __version__
from .answers import Answers, count_keys, resolve_keys
from .cache import Cache
from .engines import Engine, LocalEngine
from .formats import (
    Source,
    Target,
    check_targets,
    check_writable_as,
    count_values,
    find_ragged,
    open_source,
    output_format,
    printable,
    quoted,
    read_header,
    set_aside,
    write_output,
    writing,
)
from .options import CleanOptions
from .schema import GEO_FIELDS, GeoRow, geo_column_names

__all__ = ["GEO_FIELDS", "CleanSummary", "clean_file", "resolve_series"]


class ReportPage(Protocol):
    """Draws the run report page of a finished run (``geonorm.figures.report.report_html``)."""

    def __call__(
        self, summary: CleanSummary, *, source: str, column: str, accept: float, prefix: str
    ) -> str: ...


@dataclass
class CleanSummary:
    rows: int = 0
    distinct: int = 0
    cache_hits: int = 0
    resolved: int = 0
    decided: int = 0
    bad_lines: int = 0
    remote: dict[str, Any] = field(default_factory=dict)
    seconds: float = 0.0
    status: dict[str, int] = field(default_factory=dict)
    output: str = ""
    versions: dict[str, str] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["status_share"] = {
            k: round(v / self.rows, 4) if self.rows else 0.0 for k, v in self.status.items()
        }
        return d


def clean_file(
    input: str | Path,
    column: str,
    output: str | Path,
    options: CleanOptions | None = None,
    *,
    cache: Cache | str | Path | None = None,
    resolver: Resolver | None = None,
    engine: Engine | None = None,
    progress: Progress = no_progress,
    report_page: ReportPage | None = None,
    **settings: Any,
) -> CleanSummary:
    """Clean ``column`` of ``input`` into ``output``; returns the summary.

    Formats: CSV, TSV, Parquet, JSON Lines (from the extension, or the
    ``format`` option); ``"-"`` reads stdin or writes stdout. Settings come as a
    ``CleanOptions`` or as its fields in keywords (``accept=0.9``,
    ``remote="geocoder.toml"``, ``budget=100`` …), not both. ``progress``
    receives events (see ``geonorm.progress``); ``engine`` runs the cascade
    (default: a process pool of ``options.workers`` processes).

    With a remote stage, the strings the cascade left doubtful go to a remote
    geocoder, most rows first, within the budgets; with ``dry_run`` it only
    reports what would be sent, and nothing is written.

    A ``report`` ending in .html is a page drawn by ``report_page`` (the figures
    layer draws it: ``geonorm.clean_file`` passes
    ``geonorm.figures.report.report_html``); any other report is the summary as JSON.
    """
    if options is not None and settings:
        raise InputError(
            "give the settings either as a CleanOptions or as keywords, not both",
            hint=f"move {', '.join(sorted(settings))} into the CleanOptions",
        )
    options = options if options is not None else CleanOptions.build(**settings)
    if _is_page(options.report) and report_page is None:
        raise InputError(
            f"an HTML `report` ({options.report}) is a page drawn by geonorm.figures.report",
            hint="call geonorm.clean_file, or pass report_page=geonorm.figures.report.report_html",
        )
    started = time.perf_counter()
    summary = CleanSummary()
    targets = check_targets(
        input,
        {
            "output": ("the output", str(output)),
            "bad_lines": ("the `bad_lines` file", options.bad_lines),
            "report": ("the `report` file", options.report),
        },
    )
    source = open_source(
        input,
        encoding=options.encoding,
        separator=options.separator,
        input_format=options.input_format,
    )
    try:
        out_fmt = output_format(str(output), options.format, source)
        source = _checked(source, column, options, targets.get("bad_lines"), summary, progress)
        check_writable_as(source, out_fmt)
        counts, summary.rows = count_values(source, column)
        for text in source.notes:
            note(progress, text)
        the_cache = Cache(cache) if isinstance(cache, (str, Path)) else cache
        resolver = resolver or Resolver(accept=options.accept, progress=lambda m: note(progress, m))
        keys = {v: resolver.key(v) for v in counts}
        key_counts = _sum_by_key(counts, keys)
        note(progress, f"{summary.rows:,} rows, {len(key_counts):,} distinct strings")
        answers = resolve_keys(
            key_counts,
            resolver=resolver,
            cache=the_cache,
            accept=options.accept,
            engine=engine or LocalEngine(options.workers or os.cpu_count() or 1),
            remote=options.remote,
            progress=progress,
        )
        _take_counts(summary, answers, len(key_counts))
        if options.remote is not None and options.remote.dry_run:
            return summary
        by_key = {k: GeoRow.of(r) for k, r in answers.results.items()}
        mapping = {v: by_key[keys[v]] for v in counts}
        status: Counter[str] = Counter()
        for v, n in counts.items():
            status[mapping[v].status] += n
        names = geo_column_names(options.prefix)
        write_output(source, column, mapping, names, out_fmt, targets["output"], summary.rows)
        if the_cache is not None and str(output) != "-":
            provider = answers.remote.get("provider", "") if answers.remote else ""
            the_cache.record_run(str(Path(output).resolve()), source.name, column, provider)
    finally:
        source.cleanup()
    summary.status = {s.value: status.get(s.value, 0) for s in Status}
    summary.seconds = round(time.perf_counter() - started, 3)
    summary.output = str(output)
    summary.versions = _versions(resolver)
    if "report" in targets:
        _write_report(summary, targets["report"], str(input), column, options, report_page)
    return summary


def _checked(
    source: Source,
    column: str,
    options: CleanOptions,
    bad_lines: Target | None,
    summary: CleanSummary,
    progress: Progress,
) -> Source:
    """The source, checked: the column exists, no geo column clashes, ragged rows handled."""
    header = read_header(source)
    if column not in header:
        shown = ", ".join(printable(h, 60) for h in header[:20])
        more = f" … ({len(header):,} in all)" if len(header) > 20 else ""
        raise InputError(
            f"column {column!r} is not in {source.name}; its columns are: {shown}{more}",
            hint=_column_hint(column, header),
        )
    clash = [n for n in geo_column_names(options.prefix) if n in header]
    if clash:
        raise InputError(
            f"{source.name} already has the columns {', '.join(clash)}",
            hint="clean the original file, or choose another prefix with `prefix`",
        )
    ragged = find_ragged(source, len(header))
    if not ragged:
        return source
    if bad_lines is None:
        shown = ", ".join(str(n) for n in ragged[:10]) + (" …" if len(ragged) > 10 else "")
        raise InputError(
            f"{source.name} has {len(ragged)} row(s) whose number of fields differs from the "
            f"header's {len(header)}, at line(s) {shown}",
            hint="fix those rows, or pass `bad_lines` FILE to write them aside and go on",
        )
    source, summary.bad_lines = set_aside(source, len(header), bad_lines)
    note(progress, f"set {summary.bad_lines} ragged row(s) aside in {bad_lines.given}")
    return source


def _sum_by_key(counts: dict[str | None, int], keys: dict[str | None, str]) -> Counter[str]:
    key_counts: Counter[str] = Counter()
    for v, n in counts.items():
        key_counts[keys[v]] += n
    return key_counts


def _take_counts(summary: CleanSummary, answers: Answers, distinct: int) -> None:
    summary.distinct = distinct
    summary.cache_hits = answers.from_cache
    summary.resolved = answers.resolved
    summary.decided = answers.decided
    summary.remote = answers.remote


def _versions(resolver: Resolver) -> dict[str, str]:
    meta = resolver.index.meta
    return {
        "geonorm": __version__,
        "resolver": resolver.version,
        **{k: v for k, v in meta.items() if k.startswith(("source_", "index_"))},
        "index_built_at": meta.get("built_at", ""),
    }


def _is_page(report: str | Path | None) -> bool:
    return report is not None and Path(report).suffix.lower() in (".html", ".htm")


def _write_report(
    summary: CleanSummary,
    report: Target,
    source: str,
    column: str,
    options: CleanOptions,
    page: ReportPage | None,
) -> None:
    """The run report: a page to look at for .html/.htm, else the summary as JSON."""
    if page is not None and _is_page(report.given):
        text = page(
            summary, source=source, column=column, accept=options.accept, prefix=options.prefix
        )
    else:
        text = json.dumps(summary.to_dict(), indent=2, ensure_ascii=False) + "\n"
    with writing(report) as tmp:
        tmp.write_text(text, encoding="utf-8")


def _column_hint(column: str, header: list[str]) -> str:
    from rapidfuzz import process

    hit = process.extractOne(column, header)
    near = f"did you mean `column` {quoted(hit[0])}? " if hit and hit[1] >= 50 else ""
    return near + "pass the name of the location column with `column`"


def resolve_series(
    values: Iterable[object],
    *,
    accept: float | None = None,
    cache: Cache | None = None,
    resolver: Resolver | None = None,
    prefix: str = "geo_",
    workers: int = 1,
) -> Any:
    """Geo columns for a column of values, through the same answer pipeline as ``clean_file``.

    A polars Series gives a polars DataFrame, a pandas Series a pandas
    DataFrame (same index), anything else a dict of lists. Rows keep their order.
    """
    options = CleanOptions.build(**({} if accept is None else {"accept": accept}), prefix=prefix)
    # pandas stores a missing text as NaN: a missing value, not the text "nan".
    data = [None if isinstance(v, float) and math.isnan(v) else v for v in values]
    resolver = resolver or Resolver(accept=options.accept)
    answers = resolve_keys(
        count_keys(data, resolver),
        resolver=resolver,
        cache=cache,
        accept=options.accept,
        engine=LocalEngine(workers),
    )
    rows = [GeoRow.of(answers.results[resolver.key(v)]) for v in data]
    cols = {prefix + f: [r[i] for r in rows] for i, f in enumerate(GEO_FIELDS)}
    module = type(values).__module__.split(".")[0]
    if module == "polars":
        import polars as pl

        return pl.DataFrame(cols)
    if module == "pandas":
        import pandas as pd

        return pd.DataFrame(cols, index=values.index)  # type: ignore[attr-defined]
    return cols
