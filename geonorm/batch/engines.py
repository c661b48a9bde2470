"""Where the cascade runs for the strings the cache does not know.

An engine takes the resolver and the missing keys and hands back answers in
chunks; the answer pipeline stores each chunk in the cache as it arrives, so
an interrupted run keeps what it finished. ``LocalEngine`` uses this
machine's cores.

A chunk (``Chunk``) is a mapping of keys to answers. Where the answers were
made in another process, it holds them as the rows the cache stores
(``cache.stored_row``): those are what travel, and the cache and the answer
table take them as they are; answer objects are decoded only when asked for.
"""

from __future__ import annotations

import gc
import multiprocessing as mp
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Protocol

from ..resolve.index import PlaceIndex
from ..resolve.resolution import Resolution
from ..resolve.resolver import Resolver
from .cache import StoredRow, answer_of_row, stored_row

__all__ = ["CHUNK", "GC_THRESHOLD", "Chunk", "Engine", "LocalEngine"]

CHUNK = 2000  # distinct strings per task and per cache commit


class Chunk(Mapping[str, Resolution]):
    """The answers to a chunk of keys, as objects or as the cache's rows (``stored_row``),
    whichever they were made as; the other form is made on first use.

    Answers decoded from rows are those a later run reads back from the cache (with
    their candidates and evidence), field for field.
    """

    __slots__ = ("_answers", "_rows")

    def __init__(
        self,
        answers: Mapping[str, Resolution] | None = None,
        rows: Sequence[StoredRow] | None = None,
    ) -> None:
        if (answers is None) == (rows is None):
            raise ValueError("a chunk is made of answers or of rows, one of them")
        self._answers = dict(answers) if answers is not None else None
        self._rows = list(rows) if rows is not None else None

    @property
    def rows(self) -> list[StoredRow]:
        """The answers as the cache stores them, in the chunk's order."""
        if self._rows is None:
            assert self._answers is not None
            self._rows = [stored_row(k, r) for k, r in self._answers.items()]
        return self._rows

    @property
    def answers(self) -> dict[str, Resolution]:
        if self._answers is None:
            assert self._rows is not None
            self._answers = {row[0]: answer_of_row(row) for row in self._rows}
        return self._answers

    def __getitem__(self, key: str) -> Resolution:
        return self.answers[key]

    def __iter__(self) -> Iterator[str]:
        if self._answers is None:
            assert self._rows is not None
            return (row[0] for row in self._rows)
        return iter(self._answers)

    def __len__(self) -> int:
        return len(self._rows) if self._rows is not None else len(self.answers)


Take = Callable[[Chunk], None]


class Engine(Protocol):
    """Resolve ``keys`` with ``resolver``, calling ``take`` with each finished chunk."""

    def resolve(self, resolver: Resolver, keys: Sequence[str], take: Take) -> None: ...


class LocalEngine:
    """A process pool on this machine (``workers`` processes; 1 = in this process).

    Forked workers share the loaded index (read-only memory and the OS page
    cache); where there is no fork, spawned workers open the index file again.
    """

    def __init__(self, workers: int = 1, chunk: int = CHUNK) -> None:
        self.workers = workers
        self.chunk = chunk

    def resolve(self, resolver: Resolver, keys: Sequence[str], take: Take) -> None:
        chunks = [keys[i : i + self.chunk] for i in range(0, len(keys), self.chunk)]
        if self.workers <= 1 or len(chunks) <= 1:
            with _rare_collections() as set_aside:
                for chunk in chunks:
                    take(Chunk({k: resolver.resolve(k) for k in chunk}))
                    set_aside()
            return
        method = "fork" if "fork" in mp.get_all_start_methods() else "spawn"
        ctx = mp.get_context(method)
        shared = resolver if method == "fork" else None
        if shared is not None:
            shared.warm()  # loaded once here, shared by the forked workers
        with ctx.Pool(
            self.workers,
            initializer=_worker_init,
            initargs=(shared, str(resolver.index.path), resolver.accept),
        ) as pool:
            for rows in pool.imap(_worker_resolve, chunks):
                take(Chunk(rows=rows))


# Allocations between two collections of the cyclic garbage collector's youngest
# generation while strings are resolved (Python's default is 700). Resolving keeps
# many objects for the rest of the run (names, places, parts in the caches); at the
# default, the collector traverses them so often that it takes about a quarter of
# the time (measured with tests/perf/bench_lookup.py's strings). Answers do not change.
#
# Resolving makes no reference cycles (tests/test_engines.py checks it): what it leaves
# behind is kept (the caches), never garbage, yet the collector traverses it at least
# once, for nothing (6% of the time per string over 20,000 strings). So in this process
# what each chunk leaves is frozen (``gc.freeze``, which also restarts the count towards
# the threshold), and thawed when the run ends; a worker process's collector is off
# (it does nothing but resolve, and ends with the run).
GC_THRESHOLD = 50_000


def _collect_rarely() -> tuple[int, int, int]:
    """Raise the youngest generation's threshold to ``GC_THRESHOLD``; returns the old ones."""
    before = gc.get_threshold()
    gc.set_threshold(max(GC_THRESHOLD, before[0]), *before[1:])
    return before


def _keep_collecting() -> None:
    """In place of ``gc.freeze`` when the caller had frozen objects (unfreezing would thaw them)."""


@contextmanager
def _rare_collections() -> Iterator[Callable[[], None]]:
    """Collect garbage less often while this process resolves (``GC_THRESHOLD``); yields
    what to call after each chunk (``gc.freeze``). Thresholds and the heap are put back."""
    before = _collect_rarely()
    thawed = gc.get_freeze_count() == 0
    try:
        yield gc.freeze if thawed else _keep_collecting
    finally:
        if thawed:
            gc.unfreeze()
        gc.set_threshold(*before)


_WORKER: Resolver | None = None


def _worker_init(resolver: Resolver | None, index_path: str, accept: float) -> None:
    global _WORKER
    if resolver is None:  # spawn start method: open the index file again (no rebuild)
        resolver = Resolver(PlaceIndex(Path(index_path)), accept=accept)
    resolver.index.reopen()
    _WORKER = resolver
    gc.disable()  # a worker process does nothing but resolve (see GC_THRESHOLD)


def _worker_resolve(keys: Sequence[str]) -> list[StoredRow]:
    """Answers as the cache's rows: smaller to send than objects, and stored as they come."""
    assert _WORKER is not None
    return [stored_row(k, _WORKER.resolve(k)) for k in keys]
