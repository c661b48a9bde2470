"""File jobs: the library's ``clean`` in worker processes, with the service's cache.

A job is a row of ``DIR/service.sqlite`` and a folder ``DIR/jobs/<random id>/``
holding ``input.<ext>`` (the upload), and once done ``output.<ext>`` (the
cleaned file, byte for byte what ``geonorm clean`` writes with the same cache
and options), ``queue.csv`` (as ``review export``), ``tally.csv`` (+ ``.json``)
and ``map.svg``. Client file names never become paths.

Workers are a process pool started with ``spawn``; each loads the index once.
A worker marks its job ``running``, cleans, and marks it ``done`` or
``failed``. Answers reach the cache chunk by chunk, so a job whose server was
killed is queued again at the next start and resumes from the cache (nothing
is resolved twice). A worker whose server has gone stops (Linux: it is sent
SIGKILL with its parent; elsewhere it notices at the next chunk).
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import csv
import functools
import multiprocessing as mp
import os
import queue
import re
import secrets
import shutil
import signal
import sys
import threading
import time
from pathlib import Path
from typing import Any

from ..batch.formats import format_of_name
from ..errors import GeonormError, InputError
from ..progress import ProgressEvent
from .store import Job, ServiceStore

__all__ = ["FORMAT_SUFFIX", "JobRunner", "new_job_id", "suffix_format", "valid_job_id"]

_ID = re.compile(r"^[0-9a-f]{24}$")
FORMAT_SUFFIX = {"csv": ".csv", "tsv": ".tsv", "parquet": ".parquet", "jsonl": ".jsonl"}
_SWEEP_SECONDS = 3600.0
_CANCEL_CHECK_SECONDS = 0.5


def valid_job_id(text: str) -> bool:
    return bool(_ID.match(text))


def new_job_id() -> str:
    return secrets.token_hex(12)


def suffix_format(name: str | None) -> str | None:
    """The format an uploaded file's name suggests (its extension only), or None."""
    if not name:
        return None
    return format_of_name(name.replace("\\", "/"))


class JobRunner:
    """Submits queued jobs to the worker pool, cancels them, sweeps old ones."""

    def __init__(self, data_dir: Path, store: ServiceStore, *, workers: int, keep_days: int):
        self.data_dir = data_dir
        self.jobs_dir = data_dir / "jobs"
        self.store = store
        self.workers = max(1, workers)
        self.keep_days = keep_days
        self._pool: cf.ProcessPoolExecutor | None = None
        self._futures: dict[str, cf.Future[None]] = {}
        self._lock = threading.Lock()
        self._started = False
        self._stopping = False
        self._dispatcher: threading.Thread | None = None
        self._submitted: queue.Queue[str | None] = queue.Queue()
        self._sweeper: threading.Thread | None = None
        self._wake = threading.Event()

    # -- life -----------------------------------------------------------------
    def start(self) -> None:
        """Queue again the jobs a stopped or killed server left, and start sweeping."""
        if self._started:
            return
        self._started, self._stopping = True, False
        self.jobs_dir.mkdir(parents=True, exist_ok=True)
        self._wake.clear()
        for job in self.store.jobs(["running"]):
            self.store.update_job(job.id, state="queued", only_if=["running"])
        for job in self.store.jobs(["queued"]):
            self.submit(job.id)
        self.sweep()
        self._sweeper = threading.Thread(target=self._sweep_hourly, name="job-sweep", daemon=True)
        self._sweeper.start()

    def _new_pool(self) -> cf.ProcessPoolExecutor:
        return cf.ProcessPoolExecutor(
            self.workers,
            mp_context=mp.get_context("spawn"),
            initializer=_init_worker,
            initargs=(str(self.data_dir), os.getpid()),
        )

    def stop(self) -> None:
        """Stop the workers; running jobs stay in the cache up to their last chunk and are
        queued again (the next start resumes them)."""
        self._started, self._stopping = False, True
        self._wake.set()
        dispatcher, self._dispatcher = self._dispatcher, None
        if dispatcher is not None:
            self._submitted.put(None)
            dispatcher.join(timeout=30)
        with self._lock:
            pool, self._pool = self._pool, None
            self._futures.clear()
        if pool is None:
            return
        processes = list(getattr(pool, "_processes", {}).values())
        pool.shutdown(wait=False, cancel_futures=True)
        for proc in processes:
            with contextlib.suppress(Exception):
                proc.terminate()
        for proc in processes:
            with contextlib.suppress(Exception):
                proc.join(timeout=5)
        for job in self.store.jobs(["running"]):
            self.store.update_job(job.id, state="queued", only_if=["running"])

    # -- jobs -----------------------------------------------------------------
    def submit(self, job_id: str) -> None:
        """Hand a queued job to the workers (through the dispatching thread)."""
        with self._lock:
            if self._stopping and not self._started:
                return
            if self._dispatcher is None:
                self._dispatcher = threading.Thread(
                    target=self._dispatch, name="job-dispatch", daemon=True
                )
                self._dispatcher.start()
        self._submitted.put(job_id)

    def _dispatch(self) -> None:
        """The one thread that starts worker processes and gives them jobs. It lives as long
        as the runner: on Linux a worker is killed when the thread that started it ends."""
        while True:
            job_id = self._submitted.get()
            if job_id is None:
                return
            with self._lock:
                if self._stopping and not self._started:
                    return
                if self._pool is None:
                    self._pool = self._new_pool()
                future = self._pool.submit(_run_job, job_id)
                self._futures[job_id] = future
            future.add_done_callback(functools.partial(self._finished, job_id))

    def _finished(self, job_id: str, future: cf.Future[None]) -> None:
        with self._lock:
            if self._futures.get(job_id) is future:
                del self._futures[job_id]
        if self._stopping or future.cancelled():
            return
        exc = future.exception()
        if exc is None:
            return
        if isinstance(exc, cf.process.BrokenProcessPool):
            with self._lock:  # a worker died (out of memory, killed): a new pool for the rest
                if self._pool is not None:
                    self._pool.shutdown(wait=False)
                    self._pool = None
        self.store.update_job(
            job_id,
            only_if=["queued", "running"],
            state="failed",
            error=f"the job's worker stopped: {type(exc).__name__}: {exc}",
            hint="send the file again; if it fails again, try a smaller file",
        )

    def cancel(self, job_id: str) -> Job | None:
        """Cancel a queued or running job and delete its files; the row stays (state)."""
        job = self.store.job(job_id)
        if job is None:
            return None
        if job.state in ("queued", "running"):
            self.store.update_job(job_id, only_if=["queued", "running"], state="cancelled")
            with self._lock:
                future = self._futures.get(job_id)
            if future is not None:
                future.cancel()
        shutil.rmtree(self.jobs_dir / job_id, ignore_errors=True)
        return self.store.job(job_id)

    def sweep(self) -> int:
        """Delete the jobs (rows and files) older than ``keep_days``; returns how many."""
        before = time.time() - self.keep_days * 86400
        old = self.store.old_jobs(before)
        for job_id in old:
            shutil.rmtree(self.jobs_dir / job_id, ignore_errors=True)
            self.store.delete_job(job_id)
        # Folders no job owns (a job deleted while its upload was arriving).
        if self.jobs_dir.is_dir():
            for folder in self.jobs_dir.iterdir():
                if (
                    folder.is_dir()
                    and valid_job_id(folder.name)
                    and folder.stat().st_mtime < before
                    and self.store.job(folder.name) is None
                ):
                    shutil.rmtree(folder, ignore_errors=True)
        return len(old)

    def _sweep_hourly(self) -> None:
        while not self._wake.wait(_SWEEP_SECONDS):
            with contextlib.suppress(GeonormError, OSError):
                self.sweep()


# -- in the worker processes ---------------------------------------------------------
class _Cancelled(Exception):
    """The job was cancelled, or the server that started this worker has gone."""


_WORKER: dict[str, Any] = {}


def _die_with_parent() -> None:
    """Linux: have the kernel send SIGKILL to this worker when its server dies."""
    if not sys.platform.startswith("linux"):
        return
    with contextlib.suppress(Exception):
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG


def _init_worker(data_dir: str, parent: int) -> None:
    _die_with_parent()
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C stops the server, which stops us
    if os.getppid() != parent:
        os._exit(0)
    from ..resolve.resolver import Resolver

    root = Path(data_dir)
    _WORKER.update(
        root=root,
        parent=parent,
        store=ServiceStore(root / "service.sqlite"),
        resolver=Resolver(),  # the index, loaded once per worker
    )


def _run_job(job_id: str) -> None:
    store: ServiceStore = _WORKER["store"]
    job = store.job(job_id)
    if job is None or not store.update_job(job_id, only_if=["queued"], state="running"):
        return  # cancelled or deleted while it waited
    try:
        summary = _clean(job)
    except _Cancelled:
        now = store.job(job_id)
        if now is not None and now.state == "cancelled":
            shutil.rmtree(_WORKER["root"] / "jobs" / job_id, ignore_errors=True)
        return
    except GeonormError as exc:
        store.update_job(
            job_id, only_if=["running"], state="failed", error=exc.message, hint=exc.hint
        )
        return
    except Exception as exc:
        store.update_job(
            job_id,
            only_if=["running"],
            state="failed",
            error=f"the job failed: {type(exc).__name__}: {exc}",
            hint="check the file opens with geonorm clean; if it does, report this",
        )
        return
    store.update_job(
        job_id,
        only_if=["running"],
        state="done",
        progress=1.0,
        rows=summary["rows"],
        distinct=summary["distinct"],
        resolved=summary["resolved"],
        summary=summary,
    )


class _Watch:
    """The job's progress callback: records progress, stops on cancel or a gone server."""

    def __init__(self, job_id: str) -> None:
        self.job_id = job_id
        self.store: ServiceStore = _WORKER["store"]
        self.total = 0
        self.done = 0
        self.checked = 0.0

    def __call__(self, event: ProgressEvent) -> None:
        if event.kind == "start":
            self.total, self.done = event.total, 0
        elif event.kind == "advance":
            self.done += event.done
        self.check(force=event.kind != "note")

    def check(self, force: bool = False) -> None:
        if os.getppid() != _WORKER["parent"]:
            raise _Cancelled
        now = time.monotonic()
        if not force and now - self.checked < _CANCEL_CHECK_SECONDS:
            return
        self.checked = now
        share = self.done / self.total if self.total else 0.0
        # Resolving is most of the work; writing the files is the last 10 %.
        if not self.store.update_job(
            self.job_id, only_if=["running"], progress=round(0.9 * share, 4)
        ):
            raise _Cancelled


def _clean(job: Job) -> dict[str, Any]:
    from ..batch.cache import Cache
    from ..batch.clean import clean_file
    from ..batch.engines import LocalEngine
    from ..batch.options import CleanOptions
    from ..figures.report import report_html
    from ..review.queue import export_queue

    root: Path = _WORKER["root"]
    folder = root / "jobs" / job.id
    if not (folder / job.input).is_file():
        raise InputError("the job's uploaded file is gone", hint="send the file again as a new job")
    watch = _Watch(job.id)
    output = folder / job.output
    options = CleanOptions(accept=job.accept, format=job.format, workers=1)
    with Cache(root / "cache.sqlite") as cache:
        summary = clean_file(
            folder / job.input,
            job.column,
            output,
            options,
            cache=cache,
            resolver=_WORKER["resolver"],
            engine=LocalEngine(1),
            progress=watch,
            report_page=report_html,
        )
        watch.check(force=True)
        export_queue(
            output,
            folder / "queue.csv",
            column=job.column,
            cache=cache,
            resolver=_WORKER["resolver"],
        )
    _figures(folder, output)
    _remember_doubtful(job.id, folder / "queue.csv")
    watch.check(force=True)
    return summary.to_dict() | {"output": job.output}


def _figures(folder: Path, output: Path) -> None:
    """The per-country tally and its map. A file the tally cannot count (no rows) gets
    neither, and no map is drawn when no row was located: their routes answer 404."""
    from ..figures.mapping import write_map
    from ..figures.tally import tally_file, write_tally

    try:
        result = tally_file(output)
        write_tally(result, folder / "tally.csv", by=False)
    except InputError:
        return
    for value in ("shrunk_per_million", "count"):
        try:
            write_map(folder / "tally.csv", value, folder / "map.svg")
            return
        except InputError:
            continue


def _remember_doubtful(job_id: str, queue: Path) -> None:
    """The job's doubtful strings and their rows, for the review page's ranking."""
    from ..review.queue import restore

    resolver = _WORKER["resolver"]
    items: dict[str, tuple[str, int]] = {}
    with open(queue, encoding="utf-8", newline="") as fh:
        for row in csv.DictReader(fh):
            text = restore(row["text"])
            key = resolver.key(text)
            first, rows = items.get(key, (text, 0))
            items[key] = (first, rows + int(row["rows"] or 0))
    store: ServiceStore = _WORKER["store"]
    store.set_job_keys(job_id, [(k, t, n) for k, (t, n) in items.items()])
    store.add_seen(items)
