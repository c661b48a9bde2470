"""The decision, pruning and file prior on hand-made mentions: no place index needed.

Populations are round figures of the real places; only their order of size matters.
"""

from __future__ import annotations

import itertools
from dataclasses import replace

import pytest

from geonorm.resolve import prior
from geonorm.resolve.calibration import Calibration
from geonorm.resolve.decide import (
    Group,
    city_point,
    country_shares,
    current_places,
    decide,
    drop_minor_places,
    group_places,
    strength,
    weigh,
)
from geonorm.resolve.index import Place
from geonorm.resolve.mentions import prune
from geonorm.resolve.normalize import normalize
from geonorm.resolve.resolution import Candidate, Reason, Resolution, Status
from geonorm.resolve.stages import Mention, Reading, place_weight
from geonorm.resolve.tables import SOVEREIGN

_ids = itertools.count(1)


def place(kind: str, cc: str, name: str, pop: int, sub: str = "", fame: int = 20) -> Place:
    return Place(next(_ids), kind, cc, sub, name, 1.0, 2.0, pop, next(_ids), fame)


def reading(p: Place, origin: str = "name") -> Reading:
    return Reading(p, origin, place_weight(p, origin))


def mention(text: str, *readings: Reading, part: int = 0, start: int = 0) -> Mention:
    return Mention(text, part, start, list(readings))


PERTH_AU = place("city", "AU", "Perth", 2_000_000, "AU-WA")
PERTH_GB = place("city", "GB", "Perth", 47_000, "GB-SCT")
SCOTLAND = place("subdivision", "GB", "Scotland", 5_400_000, "GB-SCT")
LISBON = place("city", "PT", "Lisbon", 500_000, "PT-11")
BERLIN = place("city", "DE", "Berlin", 3_400_000, "DE-BE")
BRAZIL = place("country", "BR", "Brazil", 210_000_000)
HONG_KONG = place("country", "HK", "Hong Kong", 7_400_000)
HONG_KONG_CITY = place("city", "HK", "Hong Kong", 7_400_000)
CHINA = place("country", "CN", "China", 1_400_000_000)


def test_city_qualified_by_its_country_part():
    # Perth, Western Australia is far larger, but the text says Scotland.
    mentions = [
        mention("perth", reading(PERTH_AU), reading(PERTH_GB)),
        mention("scotland", reading(SCOTLAND), part=1),
    ]
    res = decide(normalize("Perth, Scotland"), mentions)
    assert (res.country, res.subdivision, res.city) == ("GB", "GB-SCT", "Perth")
    assert res.reason is Reason.CITY_WITH_CONTEXT
    assert res.evidence == {"GB": 1.0}


def test_container_joins_the_place_before_it():
    perth = mention("perth", reading(PERTH_AU), reading(PERTH_GB))
    scotland = mention("scotland", reading(SCOTLAND), part=1)
    groups, qualifiers = group_places([perth, scotland])
    assert len(groups) == 1 and qualifiers == []
    weighed = weigh(groups[0], qualifiers)
    assert weighed.dist == {"GB": 1.0}
    assert weighed.kept[0] == [reading(PERTH_GB)]  # Perth, Western Australia is not kept
    assert weighed.mentions == groups[0].mentions


def test_cities_in_two_countries_go_to_review():
    mentions = [mention("lisbon", reading(LISBON)), mention("berlin", reading(BERLIN), part=1)]
    res = decide(normalize("Lisbon / Berlin"), mentions)
    assert res.reason is Reason.SEVERAL_COUNTRIES and res.status is Status.REVIEW
    assert res.country == ""
    assert [(c.country, c.city) for c in res.candidates] == [("PT", "Lisbon"), ("DE", "Berlin")]


def test_territory_named_with_its_sovereign_is_the_territory():
    assert SOVEREIGN["HK"] == "CN"
    mentions = [
        mention("hong kong", reading(HONG_KONG), reading(HONG_KONG_CITY)),
        mention("china", reading(CHINA), part=1),
    ]
    res = decide(normalize("Hong Kong, China"), mentions)
    assert res.country == "HK"
    assert res.city == "Hong Kong"


def test_nationality_word_is_not_a_second_place():
    mentions = [
        mention("brazilian", reading(BRAZIL, "adjective"), start=1),
        mention("lisbon", reading(LISBON), start=3),
    ]
    res = decide(normalize("proud Brazilian in Lisbon"), mentions)
    assert (res.country, res.city) == ("PT", "Lisbon")


def test_drop_minor_places_never_drops_every_place():
    portugal = place("country", "PT", "Portugal", 10_000_000)
    groups, _ = group_places(
        [
            mention("brazilian", reading(BRAZIL, "adjective")),
            mention("portuguese", reading(portugal, "adjective"), start=1),
        ]
    )
    places = [weigh(g, []) for g in groups]
    assert len(places) == 2 and drop_minor_places(places) == places


def test_a_place_read_from_an_ordinary_word_does_not_make_several_countries():
    yemen_city = place("subdivision", "YE", "Amanat al Asimah", 100_000, "YE-SA")
    ibadan = place("city", "NG", "Ibadan", 3_600_000, "NG-OY")
    strong = mention("ibadan", reading(ibadan))
    weak = replace(mention("city", reading(yemen_city), part=1), prior=0.1)
    res = decide(normalize("Ibadan, the city of dreams"), [strong, weak])
    assert (res.country, res.city) == ("NG", "Ibadan")
    # Of comparable strength, the same two places are several countries.
    res = decide(normalize("Ibadan, city"), [strong, replace(weak, prior=0.9)])
    assert res.reason is Reason.SEVERAL_COUNTRIES


def test_strength_is_the_best_prior_of_a_place_and_lowers_the_score():
    groups, _ = group_places([replace(mention("lisbon", reading(LISBON)), prior=0.4)])
    assert strength(weigh(groups[0], [])) == 0.4
    sure = decide(normalize("Lisbon"), [mention("lisbon", reading(LISBON))])
    doubtful = decide(normalize("Lisbon"), [replace(mention("lisbon", reading(LISBON)), prior=0.4)])
    assert doubtful.score < sure.score


def test_cue_marked_current_place_wins_and_former_alone_decides_nothing():
    lisbon, berlin = mention("lisbon", reading(LISBON)), mention("berlin", reading(BERLIN), part=1)
    groups, _ = group_places([lisbon, berlin])
    places = [weigh(g, []) for g in groups]
    kept, by_cue = current_places(places, {(1, 0, "berlin"): "current"})
    assert by_cue and [w.best_country() for w in kept] == ["DE"]
    assert current_places(places, {(0, 0, "lisbon"): "former"}) == (places, False)
    res = decide(normalize("ex-Lisbon, now Berlin"), [lisbon, berlin])
    assert (res.country, res.city, res.reason) == ("DE", "Berlin", Reason.CURRENT_PLACE)


def test_fictional_name_wins_unless_a_confirmed_place_explains_it():
    scotland = mention("scotland", reading(SCOTLAND), part=1)
    res = decide(normalize("Hogwarts, Scotland"), [scotland], ["hogwarts"])
    assert (res.status, res.reason) == (Status.NOT_A_PLACE, Reason.FICTIONAL)
    perth = mention("perth", reading(PERTH_GB))
    res = decide(normalize("Perth, Scotland"), [perth, scotland], ["perth"])
    assert res.country == "GB"  # the place the name also is, confirmed by its country
    assert decide(normalize("Narnia"), [], ["narnia"]).reason is Reason.FICTIONAL


def test_ordinary_words_without_a_place_are_junk():
    deszk = place("city", "HU", "Deszk", 4000, "HU-CS", fame=5)
    weak = replace(mention("desk", reading(deszk, "alt"), start=2), prior=0.2)
    res = decide(normalize("under my desk"), [weak])
    assert (res.status, res.reason) == (Status.NOT_A_PLACE, Reason.JUNK)
    assert decide(normalize("Dunmarrow"), [weak]).status is not Status.NOT_A_PLACE


def test_unmatched_without_mentions_and_for_world_regions():
    assert decide(normalize("Dunmarrow"), []).reason is Reason.NO_MATCH
    asia = place("region", "", "Southeast Asia", 0)
    assert decide(normalize("Southeast Asia"), [mention("se asia", reading(asia))]).reason is (
        Reason.WORLD_REGION
    )


def test_trailing_abbreviation_that_fits_nothing_is_dropped():
    texas = place("subdivision", "US", "Texas", 29_000_000, "US-TX")
    groups, _ = group_places(
        [mention("lisbon", reading(LISBON)), mention("tx", reading(texas, "postal"), part=1)]
    )
    assert [len(g.mentions) for g in groups] == [1]


def test_country_shares_take_the_heaviest_reading_per_country():
    villages = [place("city", "US", "San Francisco", 1_000) for _ in range(12)]
    city = place("city", "US", "San Francisco", 800_000)
    other = place("city", "AR", "San Francisco", 60_000)
    shares = country_shares([reading(p) for p in [*villages, city, other]])
    assert shares["US"] == pytest.approx(800_000 / 860_000)
    assert sum(shares.values()) == pytest.approx(1.0)


def test_city_point_capital_province_and_torn_names():
    lisboa = place("subdivision", "PT", "Lisboa", 2_000_000, "PT-11")
    assert city_point([reading(LISBON), reading(lisboa)]) == (reading(LISBON), False)
    quebec_city = place("city", "CA", "Quebec", 530_000, "CA-QC")
    quebec = place("subdivision", "CA", "Quebec", 8_500_000, "CA-QC")
    assert city_point([reading(quebec_city), reading(quebec)]) == (None, False)
    # A city named like a subdivision elsewhere, between half and all its weight: torn.
    town = place("city", "XX", "Somewhere", 700_000, "XX-A")
    province = place("subdivision", "XX", "Somewhere", 1_000_000, "XX-B")
    assert city_point([reading(town), reading(province)]) == (None, True)


def test_group_readings_and_region_test():
    g = Group([mention("perth", reading(PERTH_AU), reading(PERTH_GB))])
    assert g.countries() == {"AU", "GB"} and g.has_point() and not g.is_region()


def test_prune_country_name_beats_small_towns_of_that_name():
    lebanon = place("country", "LB", "Lebanon", 5_500_000)
    lebanon_pa = place("city", "US", "Lebanon", 26_000, "US-PA")
    [m] = prune([mention("lebanon", reading(lebanon), reading(lebanon_pa))])
    assert [r.place.cc for r in m.readings] == ["LB"]


def test_prune_drops_mentions_left_without_readings():
    hamlet = place("city", "US", "One", 300, "US-KY")
    kept = prune([mention("one", reading(hamlet, "alt")), mention("lisbon", reading(LISBON))])
    assert [m.text for m in kept] == ["lisbon"]


# -- the file prior -----------------------------------------------------------
def valencia(status: Status = Status.REVIEW) -> Resolution:
    return Resolution(
        status,
        Reason.AMBIGUOUS,
        country="ES",
        subdivision="ES-VC",
        city="Valencia",
        geonameid=2509954,
        score=0.55,
        confidence=0.5,
        candidates=[
            Candidate("ES", "ES-VC", "Valencia", 39.5, -0.4, 0.55),
            Candidate("VE", "VE-G", "Valencia", 10.2, -68.0, 0.45),
        ],
        evidence={"ES": 0.55, "VE": 0.45},
    )


IDENTITY = Calibration(method="identity")


def test_reconsider_moves_an_ambiguous_name_to_the_file_country():
    res = valencia()
    new = prior.reconsider(res, {"VE": 0.9, "ES": 0.1}, IDENTITY)
    assert (new.country, new.subdivision, new.city, new.geonameid) == (
        "VE",
        "VE-G",
        "Valencia",
        None,
    )
    assert new.reason is Reason.FILE_PRIOR
    assert new.status is Status.REVIEW  # status is left to settle()
    weighted = {"ES": 0.55 * 0.12**0.3, "VE": 0.45 * 0.92**0.3}
    p_new = weighted["VE"] / sum(weighted.values())
    # The score scales by the new country's share over the old country's (0.55).
    assert new.score == pytest.approx(0.55 * p_new / 0.55)
    assert new.confidence == pytest.approx(round(new.score, 4))
    assert res.country == "ES"  # the original answer is not changed


def test_reconsider_keeps_an_answer_the_prior_does_not_strengthen():
    res = valencia()
    assert prior.reconsider(res, {"VE": 1.0}, IDENTITY).country == "VE"
    strong_es = {"ES": 0.55, "VE": 0.45}
    same = prior.reconsider(
        Resolution(Status.MATCHED, Reason.AMBIGUOUS, country="VE", evidence=strong_es),
        {"VE": 0.01, "ES": 0.99},
        IDENTITY,
    )
    assert same.country == "ES"
    unchanged = Resolution(Status.MATCHED, Reason.AMBIGUOUS, country="ES", evidence=strong_es)
    # The prior leans a little to Venezuela: Spain stays on top, less sure: kept as is.
    assert prior.reconsider(unchanged, {"ES": 0.45, "VE": 0.55}, IDENTITY) is unchanged


def confident(cc: str) -> Resolution:
    return Resolution(Status.MATCHED, Reason.CITY, country=cc, confidence=0.95, evidence={cc: 1.0})


def test_file_prior_is_laplace_smoothed_and_needs_enough_rows():
    results = {"a": confident("ES"), "b": confident("VE"), "c": valencia()}
    counts = {"a": 60, "b": 40, "c": 5}
    assert prior.file_prior(results, counts) == {"ES": 61 / 102, "VE": 41 / 102}
    assert prior.file_prior(results, {"a": 30, "b": 10, "c": 5}) == {}
    # Judged at a stricter threshold, 0.95 is not matched: no prior.
    assert prior.file_prior(results, counts, accept=0.99) == {}


def test_rerank_changes_eligible_answers_in_place_without_setting_status():
    results = {"caracas": confident("VE"), "valencia": valencia(Status.MATCHED)}
    changed = prior.rerank(results, {"caracas": 100, "valencia": 3}, IDENTITY)
    assert list(changed) == ["valencia"]
    assert results["valencia"] is changed["valencia"]
    assert results["valencia"].country == "VE"
    assert results["valencia"].status is Status.MATCHED
    assert not prior.rerank(results, {"caracas": 10, "valencia": 3}, IDENTITY)


# -- the shortcuts of the decision match the rules they stand for ---------------
def _random_readings(rng, n: int) -> list[Reading]:
    """Readings of mixed kinds, countries, origins and spellings (ties included)."""
    kinds = ["city", "city", "subdivision", "country", "area", "region"]
    origins = ["name", "alt", "short", "alias", "code3", "translation", "lower_sub", "flag"]
    out = []
    for _ in range(n):
        kind = rng.choice(kinds)
        cc = "" if kind == "region" else rng.choice(["GB", "HK", "CN", "FR", "PF", "US"])
        pop = rng.choice([0, 300, 5_000, 20_000, 150_000, 2_000_000, 9_000_000])
        name = rng.choice(["Perth", "Paris", "Reading"])
        p = place(kind, cc, name, pop, f"{cc}-1", rng.choice([0, 20, 90]))
        origin = rng.choice(origins)
        weight = rng.choice([0.0, place_weight(p, origin), 300.0])
        out.append(Reading(p, origin, weight, rng.choice([1.0, 1.0, 0.8])))
    return out


def _country_shares_by_definition(readings: list[Reading]) -> dict[str, float]:
    import math
    from collections import defaultdict

    from geonorm.resolve.tuning import FAME_TYPICAL, SIMILARITY_POWER

    d: dict[str, float] = defaultdict(float)
    for r in readings:
        if r.place.cc:
            w = r.weight * r.similarity**SIMILARITY_POWER
            if r.place.kind == "city":
                w *= math.sqrt((1 + r.place.fame) / (1 + FAME_TYPICAL))
            d[r.place.cc] = max(d[r.place.cc], w)
    total = sum(d.values())
    return {c: v / total for c, v in d.items()} if total > 0 else {}


def test_country_shares_and_heaviest_match_their_definitions_to_the_last_digit():
    import random

    from geonorm.resolve.decide import _heaviest, _top

    rng = random.Random(3)
    for n in [0, 1, 2, 3, 5, 8, 13] * 40:
        readings = _random_readings(rng, n)
        shares = country_shares(readings)
        want = _country_shares_by_definition(readings)
        assert list(shares.items()) == list(want.items())  # same values, same order
        assert _heaviest(readings) is max(readings, key=lambda r: r.weight, default=None)
        if shares:
            assert _top(shares) == max(shares, key=lambda c: (shares[c], c))
    assert _top({"FR": 0.5, "DE": 0.5, "AT": 0.25}) == "FR"  # ties go to the later code


def test_prune_skips_only_rules_that_would_change_nothing():
    import random

    from geonorm.resolve.mentions import PRUNE_RULES

    rng = random.Random(4)
    for n in [1, 2, 2, 3, 3, 4, 6, 12] * 250:
        mentions = [
            mention("perth", *_random_readings(rng, n), start=i) for i in range(rng.choice([1, 2]))
        ]
        several = len(mentions) > 1
        want = []
        for m in mentions:
            readings = m.readings
            for rule in PRUNE_RULES:
                readings = rule(readings, several)
            if readings:
                want.append(replace(m, readings=readings))
        assert prune(mentions) == want


def test_spans_read_by_one_stage_keep_their_mention_and_inputs_never_change():
    from geonorm.resolve.mentions import merge_by_span

    perth_au, perth_gb = reading(PERTH_AU), reading(PERTH_GB)
    city = mention("perth", perth_au)
    sub = mention("perth", perth_gb)
    other = mention("scotland", reading(SCOTLAND), part=1)
    by_span = merge_by_span([city, sub, other])
    assert by_span[(0, 0, "perth")].readings == [perth_au, perth_gb]
    assert by_span[(1, 0, "scotland")] is other
    assert city.readings == [perth_au] and sub.readings == [perth_gb]


def test_a_reading_reweighed_keeps_every_other_field():
    import dataclasses

    from geonorm.resolve.mentions import _reweighed

    r = Reading(PERTH_GB, "alt", 300.0, 0.8)
    assert _reweighed(r, 0.5) == dataclasses.replace(r, weight=150.0)
    assert {f.name for f in dataclasses.fields(Reading)} == {
        "place",
        "origin",
        "weight",
        "similarity",
    }


def test_code_text_needs_a_sign_every_code_form_has():
    from geonorm.resolve.mentions import _CODE_SIGN, _CODE_TOKEN, code_text

    tokens = [
        "https://x.org/a",
        "www.example",
        "~/notes",
        "../up",
        "c:\\temp",
        "<b>",
        "x</i>",
        "data.csv",
        "a{b",
        "x;",
        "$HOME",
        "`ls`",
        "f()",
    ]
    for t in tokens:
        assert _CODE_TOKEN.match(t) and _CODE_SIGN.search(t), t
    assert code_text(normalize("www.example.com ~/notes"))
    assert not code_text(normalize("Perth WA"))


def test_text_language_ties_go_to_the_earlier_language():
    from geonorm.resolve.mentions import LANGUAGES, text_language

    assert text_language([]) == 0
    assert text_language(["zzqqxv"]) == 0
    assert LANGUAGES[text_language(["the", "city"])] == "en"


def test_readings_in_a_country_include_its_territories():
    from geonorm.resolve.decide import _in_country

    hk, cn, fr = reading(HONG_KONG_CITY), reading(CHINA), reading(place("city", "FR", "Paris", 2))
    assert _in_country([hk, cn, fr], "CN") == [hk, cn]
    assert _in_country([hk, cn, fr], "FR") == [fr]
    assert _in_country([hk, cn, fr], "HK") == [hk]


def test_the_text_language_is_read_only_when_a_word_is_ordinary_somewhere():
    from geonorm.resolve import decide as decide_module
    from geonorm.resolve.decide import _unexplained
    from geonorm.resolve.mentions import _misspelt, _typed_words, text_language, word_zipf
    from geonorm.resolve.tuning import (
        MAX_STRAY_WORDS,
        ORDINARY_STRAY_WEIGHT,
        ORDINARY_WORD_ZIPF,
        STRAY_WORD_FACTOR,
    )

    texts = ["Saturn", "Satun", "Perth zzqqx", "Perth city", "Perth ciudad", "Perth qqz ville, x"]
    for text in texts:
        query = normalize(text)
        lang = text_language(t.orig for p in query.parts for t in p.tokens)
        words = [(pi, i) for pi, p in enumerate(query.parts) for i in range(len(p.tokens))]
        respelt = [
            Mention(query.parts[pi].tokens[i].key, pi, i, [reading(PERTH_GB)], "fuzzy")
            for pi, i in words
        ]
        want = [
            m
            for m in respelt
            if not (
                len(_typed_words(query, m)) == 1
                and word_zipf(_typed_words(query, m)[0])[lang] >= ORDINARY_WORD_ZIPF
            )
        ]
        assert _misspelt(query, respelt) == want, text
        perth = mention("perth", reading(PERTH_GB))
        place = decide_module.weigh(decide_module.Group([perth]), [])
        score = 1.0
        for pi, part in enumerate(query.parts):
            kept = [t.key for t in part.tokens if t.key not in decide_module.STOPWORDS]
            if pi == 0:
                stray = [w for w in kept if w != "perth"]
                count = sum(
                    ORDINARY_STRAY_WEIGHT if word_zipf(w)[lang] >= ORDINARY_WORD_ZIPF else 1.0
                    for w in stray
                )
                score *= STRAY_WORD_FACTOR ** min(count, MAX_STRAY_WORDS)
            elif kept and not part.street:
                score *= decide_module.LOOSE_PART_FACTOR
        assert _unexplained(1.0, query, [place]) == score, text
    assert _misspelt(normalize("Saturn"), [mention("saturn", reading(PERTH_GB))]) == []


def test_trusted_mentions_match_their_definition():
    import random

    from geonorm.resolve.mentions import _CODE_ORIGINS, _TRUSTED_ORIGINS, _trusted

    rng = random.Random(6)
    origins = ["name", "alt", "alias", "code2", "code3", "postal", "sub_code", "abbreviation"]
    for _ in range(400):
        readings = [Reading(PERTH_GB, rng.choice(origins), 1.0) for _ in range(rng.randint(1, 3))]
        m = Mention("man", 0, 0, readings, rng.choice(["name", "name", "flag", "postcode"]))
        typed = rng.choice([["man"], ["MAN"], ["M.A.N."], ["Man", "MAN"]])
        capitals = all(w.replace(".", "").isupper() for w in typed)
        want = m.source in ("flag", "postcode") or any(
            r.origin in _TRUSTED_ORIGINS and (capitals or r.origin not in _CODE_ORIGINS)
            for r in readings
        )
        assert _trusted(m, typed) == want


def test_main_name_demotes_variants_as_defined():
    import random

    from geonorm.resolve.mentions import _main_name
    from geonorm.resolve.tuning import (
        MAIN_NAME_OVER_TRANSLATION_POP,
        MAIN_NAME_POP,
        VARIANT_DEMOTION,
    )

    rng = random.Random(8)
    for n in [1, 2, 3, 5, 8] * 100:
        readings = _random_readings(rng, n)
        main = max(
            (r.place.pop for r in readings if r.place.kind == "city" and r.origin == "name"),
            default=0,
        )
        want = readings
        if main >= MAIN_NAME_POP:
            want = [
                replace(r, weight=r.weight * VARIANT_DEMOTION)
                if (r.origin in ("alt", "short") and r.place.kind == "city")
                or (
                    r.origin == "translation"
                    and r.place.kind == "country"
                    and main >= MAIN_NAME_OVER_TRANSLATION_POP
                )
                else r
                for r in readings
            ]
        assert _main_name(readings, n > 1) == want
