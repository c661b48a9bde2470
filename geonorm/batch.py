"""Clean a whole file: distinct strings first, cache, resolve misses, join back.

Every input row comes back in input order with all its columns untouched,
followed by the geo columns. Output goes to a temporary file renamed at the
end, so a failed run never leaves half a file behind.
"""

from __future__ import annotations

import csv
import io
import os
import sys
import time
from collections import Counter
from collections.abc import Callable, Iterable, Mapping
from dataclasses import asdict, dataclass, field
from pathlib import Path

from .cache import Cache
from .errors import InputError
from .resolution import Resolution, Status
from .resolver import DEFAULT_ACCEPT, Resolver, apply_accept

__all__ = ["GEO_FIELDS", "CleanSummary", "clean_file", "resolve_values", "geo_row"]

GEO_FIELDS = ("country", "subdivision", "city", "lat", "lon", "confidence", "reason", "status")
csv.field_size_limit(min(sys.maxsize, 2**31 - 1))


@dataclass
class CleanSummary:
    rows: int = 0
    distinct: int = 0
    cache_hits: int = 0
    resolved: int = 0
    seconds: float = 0.0
    status: dict[str, int] = field(default_factory=dict)
    output: str = ""

    def to_dict(self) -> dict:
        d = asdict(self)
        d["status_share"] = {k: round(v / self.rows, 4) if self.rows else 0.0 for k, v in self.status.items()}
        return d


def geo_row(res: Resolution) -> list[str]:
    """The geo column values of one resolution, as text."""
    return [
        res.country, res.subdivision, res.city,
        "" if res.lat is None else f"{res.lat:.5f}",
        "" if res.lon is None else f"{res.lon:.5f}",
        f"{res.confidence:.3f}", res.reason.value, res.status.value,
    ]


def resolve_values(values: Iterable[object], *, resolver: Resolver | None = None, cache: Cache | None = None,
                   accept: float | None = None, progress: Callable[[str], None] | None = None,
                   summary: CleanSummary | None = None) -> dict[str, Resolution]:
    """Resolve the distinct keys of ``values``; returns key → Resolution (file prior applied)."""
    resolver = resolver or Resolver(accept=DEFAULT_ACCEPT if accept is None else accept)
    accept = resolver.accept if accept is None else accept
    counts: Counter[str] = Counter()
    first_raw: dict[str, object] = {}
    for v in values:
        k = resolver.key(v)
        counts[k] += 1
        first_raw.setdefault(k, v)
    version = resolver.version
    found = cache.get_many(counts, version) if cache else {}
    misses = [k for k in counts if k not in found]
    if progress and misses:
        progress(f"resolving {len(misses):,} new distinct strings ({len(found):,} from the cache)")
    fresh = {k: resolver.resolve(first_raw[k]) for k in misses}
    if cache and fresh:
        cache.put_many(fresh, version)
    results = {**found, **fresh}
    for r in results.values():
        apply_accept(r, accept)
    resolver.apply_file_prior(results, counts, first_raw)
    if summary is not None:
        summary.distinct = len(counts)
        summary.cache_hits = len(found)
        summary.resolved = len(fresh)
    return results


def _open_text(path: str | Path, encoding: str) -> io.TextIOBase:
    if str(path) == "-":
        return io.TextIOWrapper(sys.stdin.buffer, encoding=encoding, newline="")
    p = Path(path)
    if not p.exists():
        raise InputError(f"input file {p} does not exist", hint="check the path and try again")
    if p.is_dir():
        raise InputError(f"{p} is a folder, not a file", hint="pass the CSV file inside it")
    return open(p, encoding=encoding, newline="")


def _closest(name: str, options: list[str]) -> str:
    from rapidfuzz import process

    hit = process.extractOne(name, options)
    return hit[0] if hit and hit[1] >= 50 else ""


def clean_file(input: str | Path, column: str, output: str | Path, *, cache: Cache | str | Path | None = None,
               accept: float = DEFAULT_ACCEPT, prefix: str = "geo_", resolver: Resolver | None = None,
               encoding: str = "utf-8-sig", progress: Callable[[str], None] | None = None) -> CleanSummary:
    """Clean ``column`` of the CSV ``input`` into ``output`` (CSV). Returns the summary."""
    started = time.perf_counter()
    summary = CleanSummary()
    try:
        with _open_text(input, encoding) as fh:
            reader = csv.reader(fh)
            header = next(reader, None)
            if header is None:
                raise InputError(f"{input} is empty", hint="pass a CSV file with a header line")
            rows = list(reader)
    except UnicodeDecodeError as exc:
        raise InputError(f"{input} is not valid {encoding} text ({exc.reason} at byte {exc.start})",
                         hint="pass the file's encoding with --encoding (for example latin-1)") from exc
    except csv.Error as exc:
        raise InputError(f"{input} is not a readable CSV file ({exc})",
                         hint="check the file is CSV with a header line") from exc
    if column not in header:
        near = _closest(column, header)
        hint = f"did you mean --column {near!r}? " if near else ""
        raise InputError(f"column {column!r} is not in {input}; its columns are: {', '.join(header)}",
                         hint=hint + "pass the name of the location column with --column")
    out_names = [prefix + f for f in GEO_FIELDS]
    clash = [n for n in out_names if n in header]
    if clash:
        raise InputError(f"{input} already has the columns {', '.join(clash)}",
                         hint="clean the original file, or choose another prefix with --prefix")
    ci = header.index(column)
    values = [r[ci] if ci < len(r) else "" for r in rows]
    if isinstance(cache, (str, Path)):
        cache = Cache(cache)
    resolver = resolver or Resolver(accept=accept, progress=progress)
    results = resolve_values(values, resolver=resolver, cache=cache, accept=accept, progress=progress,
                             summary=summary)
    status: Counter[str] = Counter()
    out_path = Path(output)
    tmp = out_path.with_name(f".{out_path.name}.part") if str(output) != "-" else None
    try:
        fh = sys.stdout if tmp is None else open(tmp, "w", encoding="utf-8", newline="")
        try:
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow(header + out_names)
            cached_rows: dict[str, list[str]] = {}
            for r, v in zip(rows, values):
                k = resolver.key(v)
                geo = cached_rows.get(k)
                if geo is None:
                    geo = cached_rows[k] = geo_row(results[k])
                status[geo[-1]] += 1
                writer.writerow(r + geo)
        finally:
            if tmp is not None:
                fh.close()
        if tmp is not None:
            os.replace(tmp, out_path)
    except OSError as exc:
        if tmp is not None and tmp.exists():
            tmp.unlink()
        raise InputError(f"cannot write {output} ({exc.strerror})",
                         hint="check the folder exists and is writable") from exc
    summary.rows = len(rows)
    summary.status = {s.value: status.get(s.value, 0) for s in Status}
    summary.seconds = round(time.perf_counter() - started, 3)
    summary.output = str(output)
    return summary


def resolve_series(values: Iterable[object], *, accept: float = DEFAULT_ACCEPT, cache: Cache | None = None,
                   resolver: Resolver | None = None) -> dict[str, list]:
    """Geo columns for a column of values (a list, pandas Series or polars Series)."""
    values = list(values)
    resolver = resolver or Resolver(accept=accept)
    results = resolve_values(values, resolver=resolver, cache=cache, accept=accept)
    cols: dict[str, list] = {f: [] for f in GEO_FIELDS}
    for v in values:
        res = results[resolver.key(v)]
        cols["country"].append(res.country)
        cols["subdivision"].append(res.subdivision)
        cols["city"].append(res.city)
        cols["lat"].append(res.lat)
        cols["lon"].append(res.lon)
        cols["confidence"].append(res.confidence)
        cols["reason"].append(res.reason.value)
        cols["status"].append(res.status.value)
    return cols


def status_counts(results: Mapping[str, Resolution]) -> Counter[str]:
    return Counter(r.status.value for r in results.values())
