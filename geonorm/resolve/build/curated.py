"""The hand-made tables in ``gazetteer/``: aliases, postal abbreviations, adjectives,
world regions, non-places, noise phrases and postcode areas."""

from __future__ import annotations

from pathlib import Path

from ..normalize import fold
from ..tables import read_table
from .builder import Counts, IndexBuilder
from .layout import ORIGIN_ID

__all__ = ["add_curated"]

# A named area spanning subdivisions weighs like this share of its country (from memory).
AREA_SHARE_OF_COUNTRY = 5


def _city(b: IndexBuilder, city: str, cc: str, sub: str = "") -> int | None:
    """The GeoNames id of the city so named in ``cc``: in ``sub`` first, then the largest."""
    found = sorted(
        b.sources.city_by_name.get((fold(city), cc), []),
        key=lambda t: (-(t[2] == sub) if sub else 0, -t[0]),
    )
    return found[0][1] if found else None


def _add_area(b: IndexBuilder, text: str, cc: str, sub: str) -> None:
    """A named region inside one country ("Bay Area"), weighed like the subdivision it
    lies in, or like a share of its country when it spans several."""
    if sub:
        pop = b.sources.sub_pop.get(sub, 0)
    else:
        country_pop = int(b.sources.gn_countries.get(cc, {}).get("population") or 0)
        pop = country_pop // AREA_SHARE_OF_COUNTRY
    pid = b.add_place("area", cc, sub, text, None, None, pop, None)
    b.add_name(text, pid, "alias")


def _add_alias(b: IndexBuilder, row: dict[str, str]) -> None:
    cc, sub, city, text = row["country"], row["subdivision"], row["city"], row["text"]
    # Another name of the place (native, other-language, former: "München", "Bombay") is
    # a name of it; nicknames, abbreviations and demonyms ("NYC", "Glaswegian") are aliases.
    origin = "name" if row["kind"] == "name" else "alias"
    if city:
        gid = _city(b, city, cc, sub)
        if gid is None:
            b.warnings.append(f"aliases.csv: city {city!r} not in GeoNames for {cc}")
        elif gid not in b.cities:
            b.warnings.append(f"aliases.csv: city {city!r} ({gid}) is not among the places added")
        else:
            b.add_name(text, b.cities[gid], origin)
    elif sub and sub not in b.subdivisions:
        b.warnings.append(f"aliases.csv: unknown subdivision {sub}")
    elif (sub or cc in b.countries) and row["kind"] == "region_in_country":
        _add_area(b, text, cc, sub)
    elif sub:
        b.add_name(text, b.subdivisions[sub], origin)
        if origin == "name" and cc in b.countries:
            # The part's own name is not a name of the whole: a translation that calls
            # the country by it (Walser "England" for the United Kingdom) gives way.
            b.names.discard((fold(text), b.countries[cc], ORIGIN_ID["translation"]))
    elif cc in b.countries:
        b.add_name(text, b.countries[cc], origin)


def _add_postcode_areas(b: IndexBuilder, folder: Path | None) -> None:
    columns = ["format", "prefix", "country"]
    for row in read_table("postcode_areas.csv", columns, ["subdivision", "city"], folder):
        gid = _city(b, row["city"], row["country"]) if row["city"] else None
        target = b.cities.get(gid) if gid is not None else None
        if target is None:
            target = b.subdivisions.get(row["subdivision"]) or b.countries.get(row["country"])
        b.postcodes.append((f"{row['format']}:{row['prefix'].lower()}", target))


def add_curated(b: IndexBuilder, folder: Path | None = None) -> Counts:
    """Each row of the curated tables in ``folder`` (default: the shipped gazetteer)."""
    before = b.counts()
    aliases = read_table(
        "aliases.csv", ["text", "country"], ["subdivision", "city", "kind"], folder
    )
    for row in aliases:
        _add_alias(b, row)
    for row in read_table("postal_abbreviations.csv", ["abbreviation", "subdivision"], (), folder):
        if row["subdivision"] in b.subdivisions:
            b.add_name(row["abbreviation"], b.subdivisions[row["subdivision"]], "postal")
    for row in read_table("country_adjectives.csv", ["text", "country"], (), folder):
        if row["country"] in b.countries:
            b.add_name(row["text"], b.countries[row["country"]], "adjective")
    for row in read_table("regions.csv", ["text", "region"], (), folder):
        b.add_name(row["text"], b.region(row["region"]), "region")
    for row in read_table("not_a_place.csv", ["text", "kind"], (), folder):
        b.nonplace.append((fold(row["text"]), row["kind"]))
    for row in read_table("fictional.csv", ["text"], (), folder):
        b.nonplace.append((fold(row["text"]), "fictional"))
    for row in read_table("noise_phrases.csv", ["phrase", "position"], (), folder):
        b.noise.append((fold(row["phrase"]), row["position"]))
    _add_postcode_areas(b, folder)
    return b.since(before)
