"""Unicode CLDR territory names from babel: countries in every language, world regions."""

from __future__ import annotations

from collections.abc import Iterable

from ..normalize import fold
from ..tables import read_table
from .builder import Counts, IndexBuilder

__all__ = ["add_cldr", "cldr_locales"]


def cldr_locales() -> list[str]:
    """Every locale babel ships: languages, scripts ("sr_Latn") and regional variants
    ("yo_BJ", "de_CH", "mn_Mong_MN"), whose names for countries may differ from the
    language's ("Bɛ̀nɛ̀", "Kapverden")."""
    from babel import localedata

    return sorted(localedata.locale_identifiers())


def add_cldr(b: IndexBuilder, locales: Iterable[str] | None = None) -> Counts:
    """Country names in each locale (all of babel's by default) as translations of the
    countries already added; numeric and grouping territories as world regions; the
    English names as primary names."""
    from babel import Locale

    before = b.counts()
    use = {row["code"]: row["use"] for row in read_table("cldr_territories.csv", ["code", "use"])}
    en_regions = Locale.parse("en").territories
    for ident in cldr_locales() if locales is None else locales:
        try:
            territories = Locale.parse(ident).territories
        except Exception:
            continue
        for code, name in territories.items():
            if code in b.countries:
                b.add_name(name, b.countries[code], "translation")
            elif use.get(code) == "junk":
                b.nonplace.append((fold(name), "junk"))
            elif code.isdigit() or use.get(code) == "region":
                b.add_name(name, b.region(en_regions.get(code, code)), "region")
    for code, name in en_regions.items():
        if code in b.countries:
            b.add_name(name, b.countries[code], "name", fuzzy=True)
    return b.since(before)
