"""The local engine: answers equal the resolver's, in one process or in several,
and the garbage collector's setting is put back after a run; a chunk's two forms
(answers, the cache's rows) hold the same answers."""

from __future__ import annotations

import gc
import math
import subprocess
import sys

import pytest

from geonorm.batch.cache import answer_of_row, stored_row
from geonorm.batch.engines import GC_THRESHOLD, Chunk, LocalEngine
from geonorm.resolve.resolution import Candidate, Reason, Resolution, Status

TEXTS = ["Lyon", "austin tx", "Perth, Scotland", "東京", "Lisbon / Berlin", "Amsterdamn", "n/a"]


def test_one_process_gives_the_resolvers_answers_and_restores_the_collector(resolver):
    keys = [resolver.key(t) for t in TEXTS]
    before = gc.get_threshold()
    seen: list[int] = []
    frozen: list[int] = []
    got: dict[str, Resolution] = {}

    def take(chunk: Chunk) -> None:
        seen.append(gc.get_threshold()[0])
        frozen.append(gc.get_freeze_count())
        got.update(chunk)

    assert gc.get_freeze_count() == 0
    LocalEngine(1, chunk=3).resolve(resolver, keys, take)
    assert gc.get_threshold() == before
    assert seen and all(t >= GC_THRESHOLD for t in seen)
    assert frozen[0] == 0 and all(n > 0 for n in frozen[1:])  # each chunk's leavings set aside
    assert gc.get_freeze_count() == 0  # and thawed at the end
    assert {k: r.to_dict() for k, r in got.items()} == {
        k: resolver.resolve(k).to_dict() for k in keys
    }


def test_two_processes_give_the_same_answers(resolver):
    keys = [resolver.key(t) for t in TEXTS * 2]
    got: dict[str, Resolution] = {}
    LocalEngine(2, chunk=2).resolve(resolver, keys, got.update)
    assert {k: r.to_dict() for k, r in got.items()} == {
        k: resolver.resolve(k).to_dict() for k in keys
    }


def test_two_processes_send_the_caches_rows(resolver):
    keys = [resolver.key(t) for t in TEXTS]
    chunks: list[Chunk] = []
    LocalEngine(2, chunk=4).resolve(resolver, keys, chunks.append)
    assert sorted(k for c in chunks for k in c) == sorted(keys)
    for chunk in chunks:
        assert chunk.rows == [stored_row(k, resolver.resolve(k)) for k in chunk]
        assert {k: r.to_dict() for k, r in chunk.items()} == {
            k: resolver.resolve(k).to_dict() for k in chunk
        }


def test_a_row_reads_back_as_the_answer_it_was_made_of():
    res = Resolution(
        Status.REVIEW,
        Reason.AMBIGUOUS,
        "US",
        "US-GA",
        "Athens",
        33.96095,
        -83.37794,
        4180386,
        0.1 + 0.2,  # a float whose shortest text has 17 digits
        -0.0,
        [Candidate("US", "US-GA", "Athens", 33.96095, -83.37794, 0.55), Candidate("GR")],
        {"US": 0.55, "GR": 0.45},
    )
    back = answer_of_row(stored_row("athens", res))
    assert back == res
    assert math.copysign(1.0, back.score) == -1.0
    chunk = Chunk(rows=[stored_row("athens", res)])
    assert len(chunk) == 1 and list(chunk) == ["athens"] and chunk["athens"] == res
    assert Chunk({"athens": res}).rows == chunk.rows


def test_a_chunk_is_made_of_one_form():
    with pytest.raises(ValueError, match="one of them"):
        Chunk()
    with pytest.raises(ValueError, match="one of them"):
        Chunk({}, [])


def test_one_process_leaves_a_callers_frozen_objects_frozen(resolver):
    keys = [resolver.key(t) for t in TEXTS]
    gc.freeze()
    try:
        held = gc.get_freeze_count()
        frozen: list[int] = []
        LocalEngine(1, chunk=2).resolve(
            resolver, keys, lambda c: frozen.append(gc.get_freeze_count())
        )
        assert frozen == [held] * 4 and gc.get_freeze_count() == held
    finally:
        gc.unfreeze()


_NO_CYCLES = """
import gc, sys
from geonorm.resolve.resolver import Resolver
texts = sys.argv[1:]
resolver = Resolver()
for t in texts:  # first use: lazy imports make cycles once
    resolver.resolve(resolver.key(t))
gc.collect()
gc.disable()
for n, t in enumerate(texts):
    for variant in (t.upper(), f"{t} {n}", f"near {t}"):
        resolver.resolve(resolver.key(variant))
print(gc.collect())
"""


def test_resolving_makes_no_reference_cycles():
    """What resolving leaves behind is frozen, or never collected in a worker: beyond first
    use, it must hold no garbage that the collector would have freed. (In a fresh process:
    other threads of this one make garbage of their own.)"""
    texts = [
        *TEXTS,
        "",
        "?",
        "48.85, 2.35",
        "48°51'N 2°21'E",
        "Europe/Paris",
        "SW1A 1AA",
        "Paris, Texas; Paris, France",
        "x" * 5000,
        "Sao Paulo Brasil",
        "Nowhere-in-particular Springs",
    ]
    done = subprocess.run(
        [sys.executable, "-c", _NO_CYCLES, *texts], capture_output=True, text=True, check=True
    )
    assert done.stdout.split() == ["0"]


def test_a_workers_collector_is_off(resolver, monkeypatch):
    import geonorm.batch.engines as engines

    monkeypatch.setattr(engines, "_WORKER", None)
    assert gc.isenabled()
    try:
        engines._worker_init(resolver, str(resolver.index.path), resolver.accept)
        assert not gc.isenabled() and engines._WORKER is resolver
    finally:
        gc.enable()
