"""Clean a whole file: distinct strings first, cache, resolve misses in parallel, join back.

Pass 1 streams the location column and counts its distinct values. Their keys
are looked up in the cache in bulk; the misses are resolved in a process pool
in chunks, and each chunk is committed to the cache, so a killed run resumes
where it stopped. The file prior and the accept threshold are applied to the
complete set of answers, then pass 2 streams the file again, appends the geo
columns and writes a temporary file that is renamed at the end. The output of
an interrupted-and-resumed run is byte-identical to an uninterrupted one.
"""

from __future__ import annotations

import json
import multiprocessing as mp
import os
import time
from collections import Counter
from collections.abc import Callable, Iterable, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path

from ..errors import InputError
from ..resolve.resolution import Resolution, Status
from ..resolve.resolver import DEFAULT_ACCEPT, Resolver, apply_accept
from .cache import Cache
from .formats import (
    count_values,
    find_ragged,
    open_source,
    output_format,
    read_header,
    set_aside,
    write_output,
)

__all__ = [
    "GEO_FIELDS",
    "CleanSummary",
    "clean_file",
    "geo_values",
    "resolve_series",
    "resolve_values",
]

GEO_FIELDS = ("country", "subdivision", "city", "lat", "lon", "confidence", "reason", "status")
CHUNK = 2000  # distinct strings per task and per cache commit


@dataclass
class CleanSummary:
    rows: int = 0
    distinct: int = 0
    cache_hits: int = 0
    resolved: int = 0
    bad_lines: int = 0
    remote: dict = field(default_factory=dict)
    seconds: float = 0.0
    status: dict[str, int] = field(default_factory=dict)
    output: str = ""
    versions: dict[str, str] = field(default_factory=dict)

    def to_dict(self) -> dict:
        d = asdict(self)
        d["status_share"] = {
            k: round(v / self.rows, 4) if self.rows else 0.0 for k, v in self.status.items()
        }
        return d


def geo_values(res: Resolution) -> list:
    """The geo column values of one resolution (numbers as numbers, missing as None)."""
    return [
        res.country,
        res.subdivision,
        res.city,
        res.lat,
        res.lon,
        round(res.confidence, 3),
        res.reason_text,
        res.status.value,
    ]


# -- the process pool ------------------------------------------------------
_WORKER: Resolver | None = None


def _worker_init(resolver: Resolver | None, index_path: str, accept: float) -> None:
    global _WORKER
    if resolver is None:  # spawn start method: open the index file again (no rebuild)
        from ..resolve.index import PlaceIndex

        resolver = Resolver(PlaceIndex(Path(index_path)), accept=accept)
    resolver.index.reopen()
    _WORKER = resolver


def _worker_resolve(keys: Sequence[str]) -> list[tuple[str, Resolution]]:
    assert _WORKER is not None
    return [(k, _WORKER.resolve(k)) for k in keys]


def _resolve_misses(
    resolver: Resolver,
    misses: list[str],
    workers: int,
    cache: Cache | None,
    version: str,
    advance: Callable[[int], None],
) -> dict[str, Resolution]:
    chunks = [misses[i : i + CHUNK] for i in range(0, len(misses), CHUNK)]
    fresh: dict[str, Resolution] = {}

    def take(pairs: list[tuple[str, Resolution]]) -> None:
        got = dict(pairs)
        if cache is not None:
            cache.put_many(got, version)  # one transaction per chunk: a killed run keeps it
        fresh.update(got)
        advance(len(got))

    if workers <= 1 or len(chunks) <= 1:
        for chunk in chunks:
            take([(k, resolver.resolve(k)) for k in chunk])
        return fresh
    # Forked workers share the loaded index (read-only memory and the OS page cache);
    # where there is no fork, spawned workers open the index file again.
    method = "fork" if "fork" in mp.get_all_start_methods() else "spawn"
    ctx = mp.get_context(method)
    shared = resolver if method == "fork" else None
    with ctx.Pool(
        workers,
        initializer=_worker_init,
        initargs=(shared, str(resolver.index.path), resolver.accept),
    ) as pool:
        for pairs in pool.imap(_worker_resolve, chunks):
            take(pairs)
    return fresh


def resolve_values(
    values: Iterable[object] | dict,
    *,
    resolver: Resolver | None = None,
    cache: Cache | None = None,
    accept: float | None = None,
    workers: int = 1,
    summary: CleanSummary | None = None,
    keyed: bool = False,
    on_misses: Callable[[int], Callable[[int], None]] | None = None,
) -> dict[str, Resolution]:
    """Resolve the distinct keys of ``values`` (or of a value → row-count dict).

    Returns key → Resolution with the accept threshold and the file prior applied.
    ``on_misses(n)`` is told how many strings need resolving and returns a
    function called with each chunk's size (for a progress bar). ``keyed`` says
    the values are cache keys already.
    """
    resolver = resolver or Resolver(accept=DEFAULT_ACCEPT if accept is None else accept)
    accept = resolver.accept if accept is None else accept
    counts: Counter[str] = Counter()
    pairs = values.items() if isinstance(values, dict) else ((v, 1) for v in values)
    for v, n in pairs:
        counts[str(v) if keyed else resolver.key(v)] += n
    version = resolver.version
    found = cache.get_many(counts, version) if cache else {}
    misses = sorted(k for k in counts if k not in found)
    advance = on_misses(len(misses)) if on_misses else (lambda n: None)
    fresh = _resolve_misses(resolver, misses, workers, cache, version, advance)
    results = {**found, **fresh}
    for r in results.values():
        apply_accept(r, accept)
    if cache is not None:  # people's decisions from the review queue win over every stage
        for k, decision in cache.overrides(counts).items():
            results[k] = Resolution.from_override(decision)
    resolver.apply_file_prior(results, counts, accept)
    if summary is not None:
        summary.distinct = len(counts)
        summary.cache_hits = len(found)
        summary.resolved = len(fresh)
    return results


class _Progress:
    """A rich progress bar on stderr, or nothing (quiet, or stderr not a terminal)."""

    def __init__(self, enabled: bool) -> None:
        self.bar = None
        if enabled:
            from rich.console import Console
            from rich.progress import (
                BarColumn,
                MofNCompleteColumn,
                Progress,
                TextColumn,
                TimeElapsedColumn,
                TimeRemainingColumn,
            )

            self.bar = Progress(
                TextColumn("{task.description}"),
                BarColumn(),
                MofNCompleteColumn(),
                TextColumn("{task.fields[rate]}"),
                TimeElapsedColumn(),
                TimeRemainingColumn(),
                console=Console(stderr=True),
                transient=True,
            )

    def __enter__(self) -> _Progress:
        if self.bar:
            self.bar.__enter__()
        return self

    def __exit__(self, *exc) -> None:
        if self.bar:
            self.bar.__exit__(*exc)

    def task(self, description: str, total: int) -> Callable[[int], None]:
        if not self.bar:
            return lambda n: None
        bar = self.bar
        tid = bar.add_task(description, total=total, rate="")
        started = time.perf_counter()

        def advance(n: int) -> None:
            bar.advance(tid, n)
            done = bar.tasks[tid].completed
            bar.update(tid, rate=f"{done / max(time.perf_counter() - started, 1e-6):,.0f}/s")

        return advance


def clean_file(
    input: str | Path,
    column: str,
    output: str | Path,
    *,
    cache: Cache | str | Path | None = None,
    accept: float = DEFAULT_ACCEPT,
    prefix: str = "geo_",
    resolver: Resolver | None = None,
    encoding: str = "utf-8",
    separator: str | None = None,
    format: str | None = None,
    input_format: str | None = None,
    workers: int | None = None,
    bad_lines: str | Path | None = None,
    report: str | Path | None = None,
    show_progress: bool = False,
    progress: Callable[[str], None] | None = None,
    remote=None,
    budget: int | None = None,
    budget_total: int | None = None,
    refresh: bool = False,
    dry_run: bool = False,
    transport=None,
) -> CleanSummary:
    """Clean ``column`` of ``input`` into ``output``; returns the summary.

    Formats: CSV, TSV, Parquet, JSON Lines (from the extension, or ``format``);
    ``"-"`` reads stdin or writes stdout. ``workers`` processes resolve new
    strings (default: the number of cores).

    ``remote`` (an adapter, or a TOML file path or entry-point name) sends the
    strings the cascade left doubtful to a remote geocoder, most rows first,
    within ``budget`` requests this run and ``budget_total`` across runs;
    ``dry_run`` only reports what would be sent and writes nothing.
    """
    started = time.perf_counter()
    summary = CleanSummary()
    say = progress or (lambda msg: None)
    source = open_source(input, encoding=encoding, separator=separator, input_format=input_format)
    try:
        out_fmt = output_format(str(output), format, source)
        header = read_header(source)
        if column not in header:
            raise InputError(
                f"column {column!r} is not in {source.name}; its columns are: {', '.join(header)}",
                hint=_column_hint(column, header),
            )
        geo_names = [prefix + f for f in GEO_FIELDS]
        clash = [n for n in geo_names if n in header]
        if clash:
            raise InputError(
                f"{source.name} already has the columns {', '.join(clash)}",
                hint="clean the original file, or choose another prefix with --prefix",
            )
        ragged = find_ragged(source, len(header))
        if ragged and bad_lines is None:
            shown = ", ".join(str(n) for n in ragged[:10]) + (" …" if len(ragged) > 10 else "")
            raise InputError(
                f"{source.name} has {len(ragged)} row(s) whose number of fields differs from the "
                f"header's {len(header)}, at line(s) {shown}",
                hint="fix those rows, or pass --bad-lines FILE to write them aside and go on",
            )
        if ragged:
            source, summary.bad_lines = set_aside(source, len(header), Path(bad_lines))  # type: ignore[arg-type]
            say(f"set {summary.bad_lines} ragged row(s) aside in {bad_lines}")
        counts, summary.rows = count_values(source, column)
        if isinstance(cache, (str, Path)):
            cache = Cache(cache)
        resolver = resolver or Resolver(accept=accept, progress=say)
        workers = workers if workers is not None else (os.cpu_count() or 1)
        if workers < 1:
            raise InputError(
                f"--workers must be at least 1, got {workers}", hint="use --workers 1 or more"
            )
        keys = {v: resolver.key(v) for v in counts}
        key_counts: Counter[str] = Counter()
        for v, n in counts.items():
            key_counts[keys[v]] += n
        with _Progress(show_progress) as bar:

            def on_misses(n: int) -> Callable[[int], None]:
                say(
                    f"{summary.rows:,} rows, {len(key_counts):,} distinct strings, {n:,} not in the cache"
                )
                return bar.task(f"resolving ({summary.rows:,} rows)", n)

            results = resolve_values(
                dict(key_counts),
                resolver=resolver,
                cache=cache,
                accept=accept,
                workers=workers,
                summary=summary,
                keyed=True,
                on_misses=on_misses,
            )
            if remote is not None:
                cache = cache if isinstance(cache, Cache) else Cache()
                _ask_remote(
                    remote,
                    results,
                    key_counts,
                    cache,
                    resolver,
                    accept,
                    summary,
                    budget=budget,
                    budget_total=budget_total,
                    refresh=refresh,
                    dry_run=dry_run,
                    transport=transport,
                )
                if dry_run:
                    summary.rows, summary.output = summary.rows, ""
                    return summary
            by_key = {k: geo_values(r) for k, r in results.items()}
            mapping = {v: by_key[keys[v]] for v in counts}
            status: Counter[str] = Counter()
            for v, n in counts.items():
                status[mapping[v][-1]] += n
            write_output(source, column, mapping, geo_names, out_fmt, str(output))
        if cache is not None and str(output) != "-":
            cache.record_run(str(Path(output).resolve()), source.name, column)
    finally:
        source.cleanup()
    summary.status = {s.value: status.get(s.value, 0) for s in Status}
    summary.seconds = round(time.perf_counter() - started, 3)
    summary.output = str(output)
    summary.versions = {
        "geonorm": _version(),
        "resolver": resolver.version,
        **{k: v for k, v in resolver.index.meta.items() if k.startswith(("source_", "index_"))},
        "index_built_at": resolver.index.meta.get("built_at", ""),
    }
    if report:
        try:
            Path(report).write_text(
                json.dumps(summary.to_dict(), indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
            )
        except OSError as exc:
            raise InputError(
                f"cannot write the report {report} ({exc.strerror})",
                hint="check the folder exists and is writable",
            ) from exc
    return summary


def _ask_remote(
    remote,
    results: dict[str, Resolution],
    key_counts: Counter[str],
    cache: Cache,
    resolver: Resolver,
    accept: float,
    summary: CleanSummary,
    **options,
) -> None:
    """Send the doubtful rest to a remote geocoder and merge its answers (see ``remote.py``)."""
    from ..resolve.resolution import Reason
    from .remote import load_adapter, merge, run_remote

    adapter = load_adapter(str(remote)) if isinstance(remote, (str, Path)) else remote
    # Never a not_a_place, never a confident match, never a person's decision; nor a
    # continent or a string known to name places in several countries: no service can
    # give those one country.
    wanted = [
        (k, n)
        for k, n in key_counts.items()
        if k
        and results[k].status in (Status.REVIEW, Status.UNMATCHED)
        and results[k].reason
        not in (Reason.WORLD_REGION, Reason.SEVERAL_COUNTRIES, Reason.REVIEWED)
    ]
    stats = run_remote(adapter, wanted, cache, **options)
    summary.remote = {
        "provider": stats.provider,
        "eligible": len(wanted),
        "already_answered": stats.from_cache,
        "planned": len(stats.planned),
        "requests": stats.requests,
        "answered": stats.answered,
        "with_results": stats.results,
        "no_result": stats.no_result,
        "errors": stats.errors,
        "rejected_results": stats.rejected,
        "retries": stats.retries,
        "breaker_open": stats.breaker_open,
        "over_budget": stats.stopped_by_budget,
        "messages": stats.messages,
        "top_planned": [{"text": k, "rows": n} for k, n in stats.planned[:20]],
    }
    if options.get("dry_run"):
        return
    changed = 0
    for key, answer in cache.remote_answers(adapter.name, [k for k, _ in wanted]).items():
        merged = merge(results[key], answer, adapter.name, resolver.index, accept)
        if merged is not results[key]:
            changed += 1
            results[key] = merged
    summary.remote["strings_changed"] = changed


def _version() -> str:
    from .. import __version__

    return __version__


def _column_hint(column: str, header: list[str]) -> str:
    from rapidfuzz import process

    hit = process.extractOne(column, header)
    near = f"did you mean --column {hit[0]!r}? " if hit and hit[1] >= 50 else ""
    return near + "pass the name of the location column with --column"


def resolve_series(
    values,
    *,
    accept: float = DEFAULT_ACCEPT,
    cache: Cache | None = None,
    resolver: Resolver | None = None,
    prefix: str = "geo_",
    workers: int = 1,
):
    """Geo columns for a column of values.

    A polars Series gives a polars DataFrame, a pandas Series a pandas
    DataFrame (same index), anything else a dict of lists. Rows keep their order.
    """
    data = list(values)
    resolver = resolver or Resolver(accept=accept)
    results = resolve_values(data, resolver=resolver, cache=cache, accept=accept, workers=workers)
    rows = [geo_values(results[resolver.key(v)]) for v in data]
    cols = {prefix + f: [r[i] for r in rows] for i, f in enumerate(GEO_FIELDS)}
    module = type(values).__module__.split(".")[0]
    if module == "polars":
        import polars as pl

        return pl.DataFrame(cols)
    if module == "pandas":
        import pandas as pd

        return pd.DataFrame(cols, index=values.index)
    return cols
