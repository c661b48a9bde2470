"""Clean a whole file: distinct strings first, the answer pipeline, join back.

Pass 1 reads the location column and counts its distinct values. They go
through the answer pipeline as columns (``columnar.answer_table``: the
cache's answers by raw text, the cascade for the misses in chunks committed
as they finish, people's decisions, the file prior, the accept threshold); a
run with a remote stage takes the same steps one answer at a time
(``answers.resolve_keys``). Pass 2 joins the geo columns to every row and
writes a temporary file that is renamed at the end. A CSV or TSV file up to
``formats.IN_MEMORY_BYTES`` is read once for both passes, and each row's geo
columns are taken by its position among the distinct values; a larger file is
streamed twice, in bounded chunks, so memory follows the distinct strings, not
the rows. The output of an interrupted-and-resumed run is byte-identical to an
uninterrupted one.
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

import polars as pl

from ..errors import InputError
from ..progress import Progress, no_progress, note
from ..resolve.resolution import Status
from ..resolve.resolver import Resolver
from ..version import __version__
from .answers import Answers, count_keys, resolve_keys
from .cache import Cache
from .columnar import answer_table, with_keys
from .engines import Engine, LocalEngine
from .formats import (
    Source,
    Target,
    check_targets,
    check_writable_as,
    distinct_values,
    find_ragged,
    geo_table,
    hold,
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
        if out_fmt != "parquet":
            hold(source, quiet=True)
        source = _checked(source, column, options, targets.get("bad_lines"), summary, progress)
        check_writable_as(source, out_fmt)
        if out_fmt != "parquet":
            hold(source)
        values, summary.rows = distinct_values(source, column)
        for text in source.notes:
            note(progress, text)
        the_cache = Cache(cache) if isinstance(cache, (str, Path)) else cache
        resolver = resolver or Resolver(accept=options.accept, progress=lambda m: note(progress, m))
        engine = engine or LocalEngine(options.workers or os.cpu_count() or 1)
        if options.remote is None:
            table = answer_table(
                values,
                resolver=resolver,
                cache=the_cache,
                accept=options.accept,
                engine=engine,
                progress=progress,
            )
            summary.distinct = table.distinct
            summary.cache_hits, summary.resolved = table.from_cache, table.resolved
            summary.decided = table.decided
            geo, status = table.by_value(), table.status_rows()
            remote_used = ""
        else:
            keyed = with_keys(values, resolver, the_cache)
            summary.distinct = keyed.get_column("key").n_unique()
            note(progress, f"{summary.rows:,} rows, {summary.distinct:,} distinct strings")
            answers = resolve_keys(
                _rows_by_key(keyed),
                resolver=resolver,
                cache=the_cache,
                accept=options.accept,
                engine=engine,
                remote=options.remote,
                progress=progress,
            )
            _take_counts(summary, answers)
            if options.remote.dry_run:
                return summary
            geo, status = _by_value(keyed, answers)
            remote_used = answers.remote.get("provider", "") if answers.remote else ""
        names = geo_column_names(options.prefix)
        write_output(source, column, geo, names, out_fmt, targets["output"], summary.rows)
        if the_cache is not None and str(output) != "-":
            the_cache.record_run(str(Path(output).resolve()), source.name, column, remote_used)
    finally:
        source.cleanup()
    summary.status = status
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


def _rows_by_key(keyed: pl.DataFrame) -> dict[str, int]:
    """Rows per key, as ``resolve_keys`` takes them."""
    by_key = keyed.group_by("key").agg(pl.col("rows").sum())
    return dict(zip(by_key["key"].to_list(), by_key["rows"].to_list(), strict=True))


def _by_value(keyed: pl.DataFrame, answers: Answers) -> tuple[pl.DataFrame, dict[str, int]]:
    """The geo table ``write_output`` takes, and rows per status, from answers by key."""
    by_key = {k: GeoRow.of(r) for k, r in answers.results.items()}
    mapping: dict[str | None, GeoRow] = {}
    status: Counter[str] = Counter()
    for value, n, key in keyed.select("value", "rows", "key").iter_rows():
        mapping[value] = by_key[key]
        status[mapping[value].status] += n
    return geo_table(mapping), {s.value: status.get(s.value, 0) for s in Status}


def _take_counts(summary: CleanSummary, answers: Answers) -> None:
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
