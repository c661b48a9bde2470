"""ISO 3166 codes and city lookup, checked against pycountry (the source of ISO 3166-1 and -2)."""

from __future__ import annotations

import pycountry
import pytest

from geonorm.codes import alpha3, country, country_name, find_city, subdivision_country

COUNTRIES = list(pycountry.countries)


def test_every_country_by_alpha2_alpha3_and_numeric():
    # Source: pycountry.countries (ISO 3166-1).
    wrong = []
    for c in COUNTRIES:
        got = (
            country(c.alpha_2),
            country(c.alpha_2.lower()),
            country(f" {c.alpha_3.lower()} "),
            country(c.numeric, numeric=True),
            country(str(int(c.numeric)), numeric=True),  # leading zeros dropped
        )
        if got != (c.alpha_2,) * 5:
            wrong.append((c.alpha_2, got))
    assert not wrong
    assert len(COUNTRIES) >= 249


def test_every_country_by_name_and_official_name():
    # Source: pycountry.countries (ISO 3166-1 English short and official names).
    wrong = []
    for c in COUNTRIES:
        for name in {c.name, getattr(c, "official_name", c.name)}:
            if country(name, names=True) != c.alpha_2 or country(name.upper(), names=True) != (
                c.alpha_2
            ):
                wrong.append((c.alpha_2, name))
    assert not wrong


def test_names_and_numbers_only_when_asked():
    assert country("France") is None and country("France", names=True) == "FR"
    assert country("250") is None and country("250", numeric=True) == "FR"
    assert country("French Republic", names=True) == "FR"


def test_alpha3_and_name_of_every_country():
    # Source: pycountry.countries; the short name is the common name where ISO has one.
    for c in COUNTRIES:
        assert alpha3(c.alpha_2) == c.alpha_3
        assert country_name(c.alpha_2) == (getattr(c, "common_name", None) or c.name)
    assert country_name("TW") == "Taiwan"  # common name, not the ISO short name
    assert (alpha3("ZZ"), country_name("ZZ")) == ("", "ZZ")


def test_kosovo_is_the_one_added_code():
    # XK / XKX are user-assigned (not in ISO 3166-1, nor in pycountry), used by the World Bank.
    assert pycountry.countries.get(alpha_2="XK") is None
    assert country("XK") == country("xkx") == country(" XKX ", numeric=True, names=True) == "XK"
    assert (alpha3("XK"), country_name("XK")) == ("XKX", "Kosovo")


def test_retired_codes_are_not_countries():
    # Source: pycountry.historic_countries (ISO 3166-3): codes withdrawn and not reassigned.
    current = {c.alpha_2 for c in COUNTRIES}
    retired = [h for h in pycountry.historic_countries if h.alpha_2 not in current]
    assert {"CS", "AN", "YU"} <= {h.alpha_2 for h in retired}
    for h in retired:
        assert country(h.alpha_2, numeric=True, names=True) is None, h.alpha_2


@pytest.mark.parametrize(
    "value", ["", "   ", "ZZ", "EU", "UK", "F", "FRAN", "Atlantis", "999", "12345", "🏳️", "F1"]
)
def test_bad_inputs_give_none(value):
    assert country(value, numeric=True, names=True) is None


def test_every_subdivision_names_its_country():
    # Source: pycountry.subdivisions (ISO 3166-2), every level.
    wrong = [
        s.code
        for s in pycountry.subdivisions
        if subdivision_country(s.code) != s.country_code
        or subdivision_country(s.code.lower()) != s.country_code
    ]
    assert not wrong
    assert len(pycountry.subdivisions) > 5000


@pytest.mark.parametrize("code", ["", "FR", "FR-", "XX-YY", "FR-ZZZ", "Île-de-France"])
def test_bad_subdivision_codes_give_none(code):
    assert subdivision_country(code) is None


def test_country_names_from_the_index(resolver):
    index = resolver.index
    assert country("Deutschland", index=index) == "DE"  # CLDR German name, via the index
    assert country("Deutschland") is None and country("Deutschland", names=True) is None
    assert country("fr", index=index) == "FR"
    assert country("Atlantis", index=index) is None


def test_find_city_takes_the_most_populous_and_honours_the_subdivision(resolver):
    index = resolver.index
    paris = find_city(index, "FR", "paris")
    assert paris is not None and (paris.name, paris.cc) == ("Paris", "FR")
    in_us = [
        h.place for h in index.lookup("paris") if h.place.kind == "city" and h.place.cc == "US"
    ]
    assert len({p.sub for p in in_us}) > 1  # several US states have a Paris
    biggest = find_city(index, "US", "Paris")
    assert biggest is not None and biggest.pop == max(p.pop for p in in_us)
    other = next(p for p in in_us if p.sub != biggest.sub)
    there = find_city(index, "US", "Paris", other.sub)
    assert there is not None and there.sub == other.sub
    empty_state = next(
        code
        for code, p in sorted(index.subdivisions.items())
        if p.cc == "US" and code not in {q.sub for q in in_us}
    )
    assert find_city(index, "US", "Paris", empty_state) is None
    assert find_city(index, "US", "Paris", empty_state, fallback=True) == biggest
    assert find_city(index, "US", "Paris", "US-ZZ") == biggest  # unknown to the index: ignored
    assert find_city(index, "FR", "Nowhereville") is None
    assert find_city(index, "DE", "Paris") is None  # a name in another country only
