"""Work kept across the strings of a run changes no answer.

Parts, their segmentation and spelling matches are kept per process; answers must
not depend on which strings came before.
"""

from __future__ import annotations

import csv
import dataclasses
from pathlib import Path

from geonorm.resolve import normalize as normalize_module
from geonorm.resolve.index import load_index
from geonorm.resolve.resolver import Resolver
from geonorm.resolve.stages import Mention, Reading

DATA = Path(__file__).parent / "data"


def _texts() -> list[str]:
    with open(DATA / "locations_dev.csv", encoding="utf-8", newline="") as fh:
        texts = [row["text"] for row in csv.DictReader(fh)][:400]
    # Invented variants sharing parts, as the texts of one file do.
    texts += ["Lyon, France", "lyon", "Lyon area", "based in Lyon", "Lyonn", "Perth, WA"]
    texts += ["Perth", "Perth, Scotland", "PERTH", "Springfield, IL", "Springfield"]
    return texts


def test_answers_do_not_depend_on_what_came_before():
    texts = _texts()
    first = Resolver(load_index())
    forward = {t: first.resolve(t).to_dict() for t in texts}
    normalize_module.fold.cache_clear()
    second = Resolver(load_index())  # its own noise phrases: parts read afresh
    assert second.noise.read_part.cache_info().currsize == 0
    backward = {t: second.resolve(t).to_dict() for t in reversed(texts)}
    again = {t: first.resolve(t).to_dict() for t in texts}
    assert backward == forward
    assert again == forward


def test_a_mention_with_other_readings_keeps_every_other_field():
    place = load_index().countries["FR"]
    m = Mention("fr", 1, 2, [Reading(place, "code2", 1.0)], source="fuzzy", prior=0.5)
    readings = [Reading(place, "name", 2.0)]
    assert m.with_readings(readings) == dataclasses.replace(m, readings=readings)
    names = {f.name for f in dataclasses.fields(Mention)}
    assert names == {"text", "part", "start", "readings", "source", "prior"}


def test_a_part_is_read_once_per_chunk_and_noise_phrases():
    resolver = Resolver(load_index())
    first = resolver.noise.read_part("Based in Lyon")
    assert resolver.noise.read_part("Based in Lyon") is first
    assert first == normalize_module._read_part("Based in Lyon", resolver.noise)
    assert first[0] is not None and first[0].key == "lyon"
    other = normalize_module.NoisePhrases([], [], [])
    assert other.read_part("Based in Lyon")[0].key == "based in lyon"


def test_parts_equal_as_before_and_hash_by_their_folded_text():
    a = Resolver(load_index()).normalize("ON, London ON").parts
    b = normalize_module.normalize("ON, London ON").parts
    assert a[0] != a[1] and hash(a[0]) == hash("on")
    assert {a[0]: 1}.get(dataclasses.replace(a[0])) == 1
    assert len({*a, *b}) == len(set(a) | set(b))
