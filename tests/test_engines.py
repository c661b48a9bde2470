"""The local engine: answers equal the resolver's, in one process or in several,
and the garbage collector's setting is put back after a run."""

from __future__ import annotations

import gc

from geonorm.batch.engines import GC_THRESHOLD, LocalEngine
from geonorm.resolve.resolution import Resolution

TEXTS = ["Lyon", "austin tx", "Perth, Scotland", "東京", "Lisbon / Berlin", "Amsterdamn", "n/a"]


def test_one_process_gives_the_resolvers_answers_and_restores_the_collector(resolver):
    keys = [resolver.key(t) for t in TEXTS]
    before = gc.get_threshold()
    seen: list[int] = []
    got: dict[str, Resolution] = {}

    def take(chunk: dict[str, Resolution]) -> None:
        seen.append(gc.get_threshold()[0])
        got.update(chunk)

    LocalEngine(1, chunk=3).resolve(resolver, keys, take)
    assert gc.get_threshold() == before
    assert seen and all(t >= GC_THRESHOLD for t in seen)
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
