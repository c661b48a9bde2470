"""ISO 3166-1 countries from pycountry, with GeoNames populations and pycountry's translations."""

from __future__ import annotations

from typing import Any

from ..tables import read_table
from .builder import Counts, IndexBuilder
from .sources import pycountry_translations

__all__ = ["add_iso3166_1"]


def _add_country(b: IndexBuilder, a2: str, c: Any, gn: dict[str, Any]) -> None:
    name = (getattr(c, "common_name", None) or c.name) if c else gn.get("name", a2)
    pop = int(gn.get("population") or 0)
    pid = b.add_place("country", a2, "", name, None, None, pop, gn.get("geonameid"))
    b.countries[a2] = pid
    if c:
        for attr in ("name", "official_name", "common_name"):
            if getattr(c, attr, None):
                b.add_name(getattr(c, attr), pid, "name", fuzzy=True)
        b.add_name(c.alpha_3, pid, "code3")
    if gn.get("name"):
        b.add_name(gn["name"], pid, "name", fuzzy=True)
    b.add_name(a2, pid, "code2")


def add_iso3166_1(b: IndexBuilder) -> Counts:
    """Every ISO 3166-1 country (and the codes in ``extra_countries.csv``) with its
    names, alpha-2 and alpha-3 codes, and pycountry's translations of its names."""
    import pycountry

    before = b.counts()
    codes = {c.alpha_2: c for c in pycountry.countries}
    extra = read_table("extra_countries.csv", ["alpha2", "alpha3", "name"])
    gn_countries = b.sources.gn_countries
    for a2 in sorted(set(codes) | {row["alpha2"] for row in extra}):
        _add_country(b, a2, codes.get(a2), gn_countries.get(a2, {}))
    for row in extra:
        b.add_name(row["name"], b.countries[row["alpha2"]], "name", fuzzy=True)
        b.add_name(row["alpha3"], b.countries[row["alpha2"]], "code3")
    for tr in pycountry_translations("iso3166-1"):
        for a2, c in codes.items():
            for attr in ("name", "common_name", "official_name"):
                value = getattr(c, attr, None)
                if value:
                    translated = tr.gettext(value)
                    if translated != value:
                        b.add_name(translated, b.countries[a2], "translation")
    return b.since(before)
