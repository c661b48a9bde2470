"""Resolver behaviour: the cascade's decisions, properties on arbitrary text."""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geonorm import Reason, Status


def test_city_with_state_abbreviation(resolver):
    r = resolver.resolve("austin tx")
    assert (r.country, r.subdivision, r.city, r.status) == ("US", "US-TX", "Austin", Status.MATCHED)
    assert r.reason == Reason.CITY_WITH_CONTEXT


def test_country_qualifier_overrides_size(resolver):
    # Perth, Western Australia is far larger, but the text says Scotland.
    r = resolver.resolve("Perth, Scotland")
    assert (r.country, r.subdivision) == ("GB", "GB-SCT")


def test_places_in_several_countries_go_to_review(resolver):
    r = resolver.resolve("Lisbon / Berlin")
    assert r.status == Status.REVIEW and r.reason == Reason.SEVERAL_COUNTRIES and not r.country
    assert {c.country for c in r.candidates} == {"PT", "DE"}


def test_places_in_one_country(resolver):
    r = resolver.resolve("Edinburgh & Glasgow")
    assert (r.country, r.subdivision, r.city, r.reason) == (
        "GB",
        "GB-SCT",
        "",
        Reason.SAME_COUNTRY_PLACES,
    )


def test_world_region_has_no_country(resolver):
    r = resolver.resolve("Southeast Asia")
    assert r.status == Status.UNMATCHED and r.reason == Reason.WORLD_REGION and not r.country


def test_not_a_place_kinds(resolver):
    assert resolver.resolve("").reason == Reason.EMPTY
    assert resolver.resolve("n/a").reason == Reason.PLACEHOLDER
    assert resolver.resolve("localhost").reason == Reason.JUNK
    assert resolver.resolve("Middle-earth").reason == Reason.FICTIONAL
    assert all(
        resolver.resolve(t).status == Status.NOT_A_PLACE
        for t in ("", "n/a", "localhost", "Middle-earth")
    )


def test_flags_and_subdivision_flags(resolver):
    assert resolver.resolve("\U0001f1e7\U0001f1f7").country == "BR"
    wales = "\U0001f3f4" + "".join(chr(0xE0000 + ord(c)) for c in "gbwls") + "\U000e007f"
    r = resolver.resolve(wales)
    assert (r.country, r.subdivision) == ("GB", "GB-WLS")


def test_scripts(resolver):
    assert resolver.resolve("東京").country == "JP"
    assert resolver.resolve("Москва").city == "Moscow"
    assert resolver.resolve("القاهرة").country == "EG"


def test_noise_phrases_in_several_languages(resolver):
    for text in (
        "based in Berlin",
        "vivo en Madrid",
        "j'habite à Lyon",
        "Greater Lagos area",
        "wohnhaft in Hamburg",
    ):
        r = resolver.resolve(text)
        assert r.status == Status.MATCHED, text
        assert r.city, text


def test_typo_is_tolerated_but_marked(resolver):
    r = resolver.resolve("Amsterdamn")
    assert r.country == "NL" and r.reason == Reason.SPELLING


def test_dominant_bare_name_and_genuine_ambiguity(resolver):
    assert resolver.resolve("Paris").country == "FR"
    assert resolver.resolve("Valencia").status == Status.REVIEW  # Spain and Venezuela, comparable


def test_file_prior_leans_ambiguous_names(resolver):
    # A bare "Valencia" is ambiguous; in a file of Venezuelans it leans to Venezuela,
    # in a file of Spaniards to Spain.
    ve = {"Caracas": 80, "Maracaibo, Venezuela": 40, "Valencia": 5}
    es = {"Madrid": 80, "Sevilla, España": 40, "Valencia": 5}
    assert resolver.resolve_many(ve)["Valencia"].country == "VE"
    assert resolver.resolve_many(es)["Valencia"].country == "ES"
    assert resolver.resolve_many(es)["Valencia"].reason == Reason.FILE_PRIOR


def test_accept_threshold_sets_status(resolver):
    from geonorm import Resolver

    strict = Resolver(resolver.index, accept=0.999)
    assert strict.resolve("Frankfurt").status == Status.REVIEW
    assert resolver.resolve("Frankfurt").country == "DE"


@settings(
    max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(st.text(max_size=60))
def test_resolver_never_raises_and_is_deterministic(resolver, text):
    first = resolver.resolve(text)
    again = resolver.resolve(text)
    assert first.to_dict() == again.to_dict()
    assert first.status in Status


@settings(
    max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    st.lists(
        st.sampled_from(
            [
                "Paris",
                "Berlin",
                ", ",
                " / ",
                "🇯🇵",
                "tx",
                "Greater",
                "area",
                "NYC",
                "東京",
                "&",
                "-",
                "n/a",
                "Georgia",
                "CA",
            ]
        ),
        max_size=6,
    )
)
def test_resolver_total_on_place_like_text(resolver, words):
    r = resolver.resolve("".join(words))
    assert 0.0 <= r.confidence <= 1.0
    assert (r.status == Status.MATCHED) == (
        bool(r.country) and r.confidence >= resolver.accept and r.reason != Reason.SEVERAL_COUNTRIES
    )
