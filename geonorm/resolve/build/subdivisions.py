"""ISO 3166-2 subdivisions from pycountry, with centroids and other names from iso3166-2."""

from __future__ import annotations

from .builder import Counts, IndexBuilder
from .sources import Subdivisions, name_variants, pycountry_translations

__all__ = ["add_iso3166_2"]


def _top_level(code: str, parents: dict[str, str | None]) -> str:
    seen = set()
    while parents.get(code) and code not in seen:
        seen.add(code)
        code = parents[code]  # type: ignore[assignment]
    return code


def _code_name(code: str) -> str | None:
    """The part of a subdivision code after the country, when it reads like a name ("BY")."""
    suffix = code.split("-", 1)[1]
    return suffix if suffix.isalpha() and len(suffix) >= 2 else None


def _add_first_level(b: IndexBuilder, tree: Subdivisions) -> None:
    sub_pop = b.sources.sub_pop
    for cc in sorted(tree.top):
        for code, s in sorted(tree.top[cc].items()):
            lat, lon = s["latLng"][:2] if s["latLng"] else (None, None)
            pid = b.add_place(
                "subdivision", cc, code, s["name"], lat, lon, sub_pop.get(code, 0), None
            )
            b.subdivisions[code] = pid
            for n in s["names"]:
                b.add_name(n, pid, "name", fuzzy=True)
            for n in s["abbreviations"]:
                b.add_name(n, pid, "postal")
            suffix = _code_name(code)
            if suffix:
                b.add_name(suffix, pid, "sub_code")


def _add_lower_levels(b: IndexBuilder, tree: Subdivisions) -> None:
    """Departments, provinces, counties: their names point at their first-level unit."""
    import pycountry

    for s in pycountry.subdivisions:
        if not tree.parents.get(s.code):
            continue
        top = _top_level(s.code, tree.parents)
        if top in b.subdivisions:
            for n in name_variants(s.name):
                b.add_name(n, b.subdivisions[top], "lower_sub")
            suffix = _code_name(s.code)
            if suffix:
                b.add_name(suffix, b.subdivisions[top], "sub_code")


def add_iso3166_2(b: IndexBuilder) -> Counts:
    """Every first-level ISO 3166-2 subdivision, weighed by the people in its GeoNames
    places, with its names, abbreviations, code and pycountry's translations; names of
    lower levels point at the first-level unit they lie in."""
    before = b.counts()
    tree = b.sources.subdivisions
    _add_first_level(b, tree)
    _add_lower_levels(b, tree)
    for tr in pycountry_translations("iso3166-2"):
        for subs in tree.top.values():
            for code, s in subs.items():
                translated = tr.gettext(s["name"])
                if translated != s["name"]:
                    b.add_name(translated, b.subdivisions[code], "translation")
    return b.since(before)
