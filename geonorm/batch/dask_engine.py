"""Cleaning tables on a Dask cluster: the same answer pipeline, the cascade on the workers.

The steps, and what travels between client and cluster:

1. **distinct strings** — the workers read the partitions and count the
   location column's distinct values; only the counts come to the client;
2. **answers** — the client runs the answer pipeline over the distinct values
   as columns (``columnar.answer_table``: keys, cache, cascade for the misses,
   decisions, file prior, settle), so it holds polars columns rather than a
   Python object per string. ``DaskEngine`` runs the cascade for the
   misses on the workers in chunks; each worker process loads the place index
   once (a worker plugin, and a lazy load for workers that join later), and
   the client stores every chunk in its cache as it arrives — workers never
   write to the cache;
3. **join back** — the answer table (distinct values and their geo columns)
   goes to the workers once, as a dependency of every partition, and each
   partition gets its geo columns appended in its own row order.

Workers must give the answers the client would: before any work, and again
with every chunk, each worker's geonorm version and resolver version (which
covers the index build and the calibration) are compared with the client's,
and a difference stops the run with both versions named.
"""

from __future__ import annotations

import asyncio
import json
import math
import os
import threading
import time
from collections.abc import Callable, Sequence
from contextlib import ExitStack, nullcontext
from pathlib import Path
from typing import TYPE_CHECKING, Any, NamedTuple

import pandas as pd
import polars as pl
import pyarrow as pa

from ..errors import InputError, PlaceIndexError
from ..progress import Progress, no_progress, note
from ..resolve.index import PlaceIndex, default_index_path
from ..resolve.resolver import DEFAULT_ACCEPT, Resolver
from .cache import Cache, StoredRow, stored_row
from .clean import CleanSummary
from .columnar import AnswerTable, answer_table
from .engines import CHUNK, Chunk, Engine, LocalEngine, Take
from .options import CleanOptions
from .schema import GEO_FIELDS, NUMERIC_FIELDS, geo_column_names

if TYPE_CHECKING:
    import dask.dataframe as dd
    from distributed import Client

__all__ = ["DaskEngine", "check_workers", "clean_dataset", "clean_frame", "resolved_here"]

_PARQUET = (".parquet", ".pq", ".parq")
_CSV = (".csv", ".tsv", ".txt")
_PART = "part-{:05d}.parquet"
NULL_KEY = "\x00"  # stands for a missing value in the answer table
CONNECT_SECONDS = 30  # to reach a scheduler (common practice for a remote service)
WORKER_WAIT_SECONDS = 60  # for a first worker to join the scheduler


# -- on the workers ---------------------------------------------------------------------------

_lock = threading.Lock()
_resolvers: dict[tuple[str, float], Resolver] = {}
_resolved = 0


def _worker_resolver(index_path: str | None, accept: float) -> Resolver:
    """This process's resolver, loaded once (the index is opened, never built, here)."""
    path = str(Path(index_path) if index_path else default_index_path())
    with _lock:
        resolver = _resolvers.get((path, accept))
        if resolver is None:
            resolver = Resolver(PlaceIndex(Path(path)), accept=accept)
            _resolvers[(path, accept)] = resolver
        return resolver


def _fingerprint(resolver: Resolver) -> dict[str, str]:
    """What answers depend on: geonorm's version and the resolver's (index build, calibration)."""
    from .. import version

    return {"geonorm": version.__version__, "resolver": resolver.version}


def _worker_name() -> str:
    try:
        from distributed import get_worker

        return str(get_worker().address)
    except ValueError:  # not inside a worker: a local scheduler
        return f"process {os.getpid()}"


def _worker_info(index_path: str | None, accept: float) -> dict[str, str]:
    """The worker's fingerprint, or why it has none (run on every worker by the client)."""
    try:
        return _fingerprint(_worker_resolver(index_path, accept))
    except PlaceIndexError as exc:
        return {"error": exc.message}


def _resolve_chunk(
    keys: Sequence[str], expected: dict[str, str], index_path: str | None, accept: float
) -> list[StoredRow]:
    """One task: resolve a chunk of keys, after checking this worker answers like the client."""
    global _resolved
    resolver = _worker_resolver(index_path, accept)
    mine = _fingerprint(resolver)
    if mine != expected:
        raise _mismatch(_worker_name(), mine, expected)
    rows = [stored_row(k, resolver.resolve(k)) for k in keys]
    with _lock:
        _resolved += len(rows)
    return rows


def resolved_here() -> int:
    """How many strings this process has resolved for ``DaskEngine`` (run it on the workers)."""
    return _resolved


def _mismatch(
    worker: str, theirs: dict[str, str], ours: dict[str, str], index: str | Path | None = None
) -> InputError:
    where = f"copy {index}" if index else "copy the client's index file"
    return InputError(
        f"worker {worker} runs geonorm {theirs['geonorm']} with resolver version "
        f"{theirs['resolver']}, but this client runs geonorm {ours['geonorm']} with resolver "
        f"version {ours['resolver']}; their answers would differ",
        hint=f"install geonorm {ours['geonorm']} on every worker and give each the same place "
        f"index: {where} (geonorm gazetteer info shows it) into the worker's data folder",
    )


def _plugin(index_path: str | None, accept: float) -> Any:
    from distributed import WorkerPlugin

    class IndexLoader(WorkerPlugin):
        """Loads the place index when a worker (or its replacement after a restart) starts."""

        name = "geonorm-index"

        def setup(self, worker: Any) -> None:
            _worker_info(index_path, accept)  # a missing index is reported by the check

    return IndexLoader()


# -- on the client ----------------------------------------------------------------------------


def check_workers(client: Client, resolver: Resolver, index_path: str | None = None) -> int:
    """Stop unless every worker answers like ``resolver``; returns the number of workers.

    Raises ``PlaceIndexError`` for a worker without a place index, ``InputError``
    for one with another geonorm, index build or calibration.
    """
    try:
        client.wait_for_workers(1, timeout=WORKER_WAIT_SECONDS)
    except (TimeoutError, asyncio.TimeoutError) as exc:
        raise InputError(
            f"the Dask scheduler {getattr(client.scheduler, 'address', '')} has no workers",
            hint="start workers: dask worker tcp://HOST:PORT (on each machine)",
        ) from exc
    ours = _fingerprint(resolver)
    infos = client.run(_worker_info, index_path, resolver.accept)
    for worker, info in sorted(infos.items()):
        if "error" in info:
            raise PlaceIndexError(
                f"worker {worker}: {info['error']}",
                hint=f"copy this client's index {resolver.index.path} to the worker's data "
                "folder (geonorm gazetteer info on the worker shows where)",
            )
        if info != ours:
            raise _mismatch(worker, info, ours, resolver.index.path)
    return len(infos)


class DaskEngine:
    """Resolve cache misses on the workers of a Dask cluster, up to ``chunk`` strings per task.

    At most ``ahead`` tasks per worker thread are in flight, so the client holds
    few answers at a time; each finished chunk goes to ``take`` (the pipeline
    stores it in the cache) at once. A worker that dies mid-task is replaced by
    its nanny and its chunks run again elsewhere; the answers do not change.
    ``index_path`` is where the workers find the place index (default: their
    own data folder).
    """

    def __init__(
        self,
        client: Client,
        chunk: int = CHUNK,
        *,
        index_path: str | None = None,
        ahead: int = 2,
    ) -> None:
        self.client = client
        self.chunk = chunk
        self.index_path = index_path
        self.ahead = ahead
        self._started: dict[str, str] | None = None

    def start(self, resolver: Resolver) -> None:
        """Have every worker load the index (now, and when it restarts) and check its versions.

        ``resolve`` calls it; calling it earlier finds a bad worker before any work.
        """
        if self._started == _fingerprint(resolver):
            return
        self.client.register_plugin(_plugin(self.index_path, resolver.accept))
        check_workers(self.client, resolver, self.index_path)
        self._started = _fingerprint(resolver)

    def resolve(self, resolver: Resolver, keys: Sequence[str], take: Take) -> None:
        from distributed import as_completed

        self.start(resolver)
        expected = _fingerprint(resolver)
        threads = sum(self.client.nthreads().values()) or 1
        # Small jobs are split finer, so every worker gets a share.
        size = max(1, min(self.chunk, math.ceil(len(keys) / (4 * threads))))
        # Made one at a time, as they are sent: the keys are not all Python strings at once.
        chunks = (list(keys[i : i + size]) for i in range(0, len(keys), size))
        window = max(2, self.ahead * threads)
        args = (expected, self.index_path, resolver.accept)
        todo = chunks
        running = as_completed()
        pending: set[Any] = set()

        def submit_next() -> None:
            chunk = next(todo, None)
            if chunk is not None:
                future = self.client.submit(_resolve_chunk, chunk, *args, pure=False)
                pending.add(future)
                running.add(future)

        try:
            for _ in range(window):
                submit_next()
            for future in running:
                rows = future.result()
                pending.discard(future)
                future.release()
                submit_next()
                take(Chunk(rows=rows))
        finally:
            self.client.cancel(list(pending))


# -- distinct strings, the answer table, the join -----------------------------------------------


def _as_text(values: pd.Series) -> pd.Series:
    """The location values as text, a missing value as ``NULL_KEY`` (as in ``clean``)."""
    return values.astype("string").fillna(NULL_KEY).astype(object)


def _counts(ddf: dd.DataFrame, column: str) -> pl.DataFrame:
    """Distinct values of ``column`` (``value``, missing as null) with their row counts
    (``rows``), counted on the cluster; on the client as columns, not Python objects."""
    text = ddf[column].map_partitions(_as_text, meta=(column, object))
    # A tree of partial counts, no shuffle: the result comes to the client whole anyway.
    counted = text.value_counts(split_out=1).compute()
    values = pa.array(counted.index.to_numpy(), type=pa.large_string())
    frame = pl.DataFrame(
        {
            "value": pl.from_arrow(values),
            "rows": pl.Series(counted.to_numpy(), dtype=pl.Int64),
        }
    )
    return frame.with_columns(pl.col("value").replace(NULL_KEY, None))


def _answer_table(table: AnswerTable, prefix: str) -> pd.DataFrame:
    """One row per distinct value (``NULL_KEY`` for missing) with its geo columns."""
    by_value = table.by_value()
    data: dict[str, Any] = {}
    for name, field in zip(geo_column_names(prefix), GEO_FIELDS, strict=True):
        column = by_value.get_column(field)
        data[name] = (
            column.cast(pl.Float64).fill_null(float("nan")).to_numpy()
            if field in NUMERIC_FIELDS
            else pd.array(column.to_arrow(), dtype=pd.StringDtype("pyarrow"))  # compact, fast
        )
    values = by_value.get_column("value").fill_null(NULL_KEY)
    # Text held by Arrow, not a Python string per value: compact here and in the graph.
    index = pd.Index(pd.array(values.to_arrow(), dtype=pd.StringDtype("pyarrow")))
    return pd.DataFrame(data, index=index)


def _join_partition(part: pd.DataFrame, table: pd.DataFrame, column: str) -> pd.DataFrame:
    """The partition with the geo columns appended, its rows and their order kept."""
    positions = table.index.get_indexer(_as_text(part[column]))
    if (positions < 0).any():
        raise InputError(
            f"a value of {column!r} was not there when the distinct values were counted",
            hint="the input changed during the run: clean it again once it stays the same",
        )
    geo = {
        name: pd.Series(table[name].array.take(positions), index=part.index)
        for name in table.columns
    }
    return part.assign(**geo)


class _Prepared(NamedTuple):
    joined: dd.DataFrame  # lazy: the input with the geo columns
    summary: CleanSummary  # its figures (the answers themselves are in ``joined``)


def _default_client() -> Client | None:
    try:
        from distributed import default_client

        return default_client()
    except (ImportError, ValueError):
        return None


def _prepare(
    ddf: dd.DataFrame,
    column: str,
    *,
    cache: Cache | None,
    accept: float,
    client: Client | None,
    resolver: Resolver | None,
    prefix: str,
    engine: Engine | None,
    progress: Progress,
) -> _Prepared:
    import dask

    _check_columns(list(ddf.columns), column, prefix, "the table")
    resolver = resolver or Resolver(accept=accept, progress=lambda m: note(progress, m))
    if engine is None:
        engine = DaskEngine(client) if client is not None else LocalEngine(os.cpu_count() or 1)
    if isinstance(engine, DaskEngine):
        engine.start(resolver)  # a worker with other versions stops the run before any work
    note(progress, "counting distinct strings on the cluster")
    with client.as_current() if client is not None else nullcontext():
        values = _counts(ddf, column)
    answers = answer_table(
        values, resolver=resolver, cache=cache, accept=accept, engine=engine, progress=progress
    )
    del values
    table = _answer_table(answers, prefix)
    summary = _summary(answers, resolver)
    del answers  # the client keeps only the table the workers receive
    meta = _join_partition(ddf._meta, table.iloc[:0], column)
    # Every partition depends on the same graph key, so each worker receives the table once.
    # It holds one row per distinct string: the pipeline needs every answer at once (the
    # file prior weighs them all), and only distinct strings and answers travel.
    joined = ddf.map_partitions(_join_partition, dask.delayed(table), column, meta=meta)
    return _Prepared(joined, summary)


def clean_frame(
    ddf: dd.DataFrame,
    column: str,
    *,
    cache: Cache | str | Path | None = None,
    accept: float = DEFAULT_ACCEPT,
    client: Client | None = None,
    resolver: Resolver | None = None,
    prefix: str = "geo_",
    engine: Engine | None = None,
    progress: Progress = no_progress,
) -> dd.DataFrame:
    """``ddf`` with the geo columns of ``column`` appended: lazy, one task per partition.

    The distinct values are counted and resolved now (on ``client``'s cluster,
    default: the current distributed client; without one, in processes on this
    machine) and the answers stored in ``cache``; the join runs when the result
    is computed or written. Rows keep their partitions and their order.
    """
    CleanOptions(accept=accept, prefix=prefix)  # refuses bad values with the usual words
    with ExitStack() as stack:
        the_cache = _open_cache(cache, stack)
        prepared = _prepare(
            ddf,
            column,
            cache=the_cache,
            accept=accept,
            client=client or _default_client(),
            resolver=resolver,
            prefix=prefix,
            engine=engine,
            progress=progress,
        )
    return prepared.joined


def _open_cache(cache: Cache | str | Path | None, stack: ExitStack) -> Cache | None:
    if isinstance(cache, (str, Path)):
        return stack.enter_context(Cache(cache))
    return cache


def _check_columns(columns: list[str], column: str, prefix: str, name: str) -> None:
    if column not in columns:
        raise InputError(
            f"column {column!r} is not in {name}; its columns are: {', '.join(columns)}",
            hint="pass the name of the location column with `column`",
        )
    clash = [n for n in geo_column_names(prefix) if n in columns]
    if clash:
        raise InputError(
            f"{name} already has the columns {', '.join(clash)}",
            hint="clean the original data, or choose another prefix with `prefix`",
        )


# -- a whole dataset: read, clean, write one Parquet file per partition --------------------------


def _input_files(input: str) -> tuple[Any, list[str]]:
    """The filesystem and the data files of ``input`` (a file, a folder or a glob), sorted."""
    import fsspec

    fs, _, paths = fsspec.get_fs_token_paths(input)
    files: list[str] = []
    for path in paths:
        if fs.isdir(path):
            files += [p for p in fs.find(path) if p.lower().endswith(_PARQUET + _CSV)]
        elif fs.exists(path):
            files.append(path)
    if not files:
        raise InputError(
            f"{input} matches no Parquet or CSV file",
            hint="pass a file, a folder of .parquet or .csv files, or a glob (data/*.parquet)",
        )
    return fs, sorted(files)


def _read(input: str, fs: Any, files: list[str], options: CleanOptions) -> dd.DataFrame:
    import dask.dataframe as dd

    protocol = fs.protocol if isinstance(fs.protocol, str) else fs.protocol[0]
    urls = files if protocol in ("file", "local") else [f"{protocol}://{f}" for f in files]
    kinds = {("parquet" if f.lower().endswith(_PARQUET) else "csv") for f in files}
    if len(kinds) > 1:
        raise InputError(
            f"{input} holds both Parquet and CSV files",
            hint="pass a folder or glob of one kind of file",
        )
    if kinds == {"parquet"}:
        return dd.read_parquet(urls)
    separator = options.separator or ("\t" if files[0].lower().endswith(".tsv") else ",")
    # Every column as text and only an empty field as missing, as ``clean`` reads CSV.
    return dd.read_csv(
        urls,
        dtype=str,
        sep=separator,
        encoding=options.encoding,
        keep_default_na=False,
        na_values=[""],
    )


def _refuse_options(options: CleanOptions, output: str) -> None:
    unsupported = {
        "remote": options.remote is not None,
        "bad_lines": options.bad_lines is not None,
        "format": options.format not in (None, "parquet"),
        "input_format": options.input_format is not None,
        "report": options.report is not None
        and Path(options.report).suffix.lower() in (".html", ".htm"),
    }
    named = [f"`{k}`" for k, given in unsupported.items() if given]
    if named:
        raise InputError(
            f"{', '.join(named)} do(es) not apply with the Dask engine",
            hint="drop them (a `report` ending in .json works), or clean one file at a time "
            "without `engine` dask",
        )
    if output == "-":
        raise InputError(
            "the Dask engine writes a folder of Parquet files, not standard output",
            hint="pass a folder with `out`",
        )


def _check_output(output: str, input_files: list[str]) -> Callable[[], None]:
    """Refuse an output folder in use; returns what makes it ready to write into (removing
    the part files of an earlier run), to call once the answers are in."""
    import fsspec

    fs, _, (root,) = fsspec.get_fs_token_paths(output)
    found = [p for p in fs.find(root) if not p.endswith("/")] if fs.exists(root) else []
    if set(found) & set(input_files):
        raise InputError(
            f"the output folder {output} holds input files",
            hint="write the output to another folder with `out`",
        )
    foreign = [p for p in found if not _is_part(p)]
    if foreign:
        raise InputError(
            f"the output folder {output} already holds other files ({foreign[0]} …)",
            hint="pass an empty or new folder with `out`",
        )

    def make_ready() -> None:
        for p in found:
            fs.rm(p)
        fs.makedirs(root, exist_ok=True)

    return make_ready


def _is_part(path: str) -> bool:
    name = path.rsplit("/", 1)[-1]
    return name.startswith("part-") and name.endswith(".parquet")


def clean_dataset(
    input: str | Path,
    column: str,
    output: str | Path,
    options: CleanOptions | None = None,
    *,
    cache: Cache | str | Path | None = None,
    scheduler: str | None = None,
    client: Client | None = None,
    resolver: Resolver | None = None,
    engine: Engine | None = None,
    progress: Progress = no_progress,
) -> CleanSummary:
    """Clean ``column`` of a Parquet or CSV dataset into a folder of Parquet files.

    ``input`` is a file, a folder or a glob, on any filesystem fsspec reaches;
    ``output`` receives ``part-00000.parquet`` … one per partition, each with its
    rows in input order, the input columns, then the geo columns. The cluster is
    ``client``'s, or the scheduler at ``scheduler``, or else a local cluster of
    ``options.workers`` processes started and closed here.
    """
    import dask

    options = options or CleanOptions()
    _refuse_options(options, str(output))
    started = time.perf_counter()
    with ExitStack() as stack:
        the_cache = _open_cache(cache, stack)
        client = client or _connect(scheduler, options.workers, stack)
        stack.enter_context(client.as_current())  # the writing runs there too
        fs, files = _input_files(str(input))
        ddf = _read(str(input), fs, files, options)
        _check_columns(list(ddf.columns), column, options.prefix, str(input))
        make_ready = _check_output(str(output), files)
        prepared = _prepare(
            ddf,
            column,
            cache=the_cache,
            accept=options.accept,
            client=client,
            resolver=resolver,
            prefix=options.prefix,
            engine=engine,
            progress=progress,
        )
        joined = prepared.joined
        note(progress, f"writing {joined.npartitions} Parquet file(s) to {output}")
        make_ready()
        # The graph carries the answer table once (one row per distinct string): expected.
        with dask.config.set({"distributed.admin.large-graph-warning-threshold": "4GB"}):
            joined.to_parquet(str(output), write_index=False, name_function=_PART.format)
        if the_cache is not None:
            local = "://" not in str(output)
            the_cache.record_run(
                str(Path(output).resolve()) if local else str(output), str(input), column
            )
    summary = prepared.summary
    summary.seconds = round(time.perf_counter() - started, 3)
    summary.output = str(output)
    if options.report:
        _write_report(summary, Path(options.report))
    return summary


def _connect(scheduler: str | None, workers: int | None, stack: ExitStack) -> Client:
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:
        raise InputError(
            "the Dask engine needs dask.distributed", hint="pip install 'geonorm[dask]'"
        ) from exc
    if scheduler:
        try:
            return stack.enter_context(Client(scheduler, timeout=CONNECT_SECONDS))
        except OSError as exc:
            raise InputError(
                f"cannot reach the Dask scheduler at {scheduler} ({exc})",
                hint="start one with: dask scheduler, then pass its address with `scheduler`",
            ) from exc
    cluster = stack.enter_context(
        LocalCluster(
            n_workers=workers or os.cpu_count() or 1,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
            # No dashboard; the scheduler's small HTTP server on any free port of this machine.
            scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
        )
    )
    return stack.enter_context(Client(cluster))


def _summary(table: AnswerTable, resolver: Resolver) -> CleanSummary:
    from ..version import __version__

    meta = resolver.index.meta
    return CleanSummary(
        rows=int(table.values.get_column("rows").sum()),
        distinct=table.distinct,
        cache_hits=table.from_cache,
        resolved=table.resolved,
        decided=table.decided,
        status=table.status_rows(),
        versions={
            "geonorm": __version__,
            "resolver": resolver.version,
            **{k: v for k, v in meta.items() if k.startswith(("source_", "index_"))},
            "index_built_at": meta.get("built_at", ""),
        },
    )


def _write_report(summary: CleanSummary, report: Path) -> None:
    try:
        report.write_text(
            json.dumps(summary.to_dict(), indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
        )
    except OSError as exc:
        raise InputError(
            f"cannot write the report {report} ({exc.strerror})",
            hint="check the folder exists and is writable",
        ) from exc
