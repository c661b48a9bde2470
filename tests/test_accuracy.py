"""Rules that weigh whole readings of a text: ordinary words, qualifiers in context,
the current place, not-a-place against unknown places, fictional names, and the
accuracy on both labelled sets.

Word frequencies come from wordfreq (its shipped "small" lists); country and
subdivision codes are checked against pycountry.
"""

from __future__ import annotations

import csv
from pathlib import Path

import pycountry
import pytest

from geonorm.batch.answers import count_keys, resolve_keys
from geonorm.resolve.calibration import Calibration, expected_calibration_error, fit
from geonorm.resolve.mentions import (
    LANGUAGES,
    code_text,
    cue_roles,
    ordinary_text,
    text_language,
    word_zipf,
)
from geonorm.resolve.normalize import normalize
from geonorm.resolve.resolution import Reason, Resolution, Status
from geonorm.resolve.tables import COUNTRY_ABBREVIATIONS, PLACE_CUES
from geonorm.review import refit

DATA = Path(__file__).parent / "data"
# The third set is never fitted or tuned on: an estimate for text nobody tuned to.
SETS = [DATA / "locations_dev.csv", DATA / "locations_more.csv", DATA / "locations_fresh.csv"]
NOT_A_PLACE_KINDS = {"junk", "empty_like", "fictional"}


def _answer(resolver, text: str) -> Resolution:
    return resolver.resolve(text)


# -- the word prior -------------------------------------------------------------
def test_word_frequencies_come_from_wordfreq():
    # wordfreq's English list: "the" is among the commonest words, "kisumu" is not in
    # the small list at all.
    the = word_zipf("the")[LANGUAGES.index("en")]
    assert the > 7
    assert word_zipf("kisumu")[LANGUAGES.index("en")] == 0.0
    assert LANGUAGES[text_language(["jetzt", "wohne", "ich"])] == "de"
    assert LANGUAGES[text_language(["and", "proud", "of", "it"])] == "en"
    assert LANGUAGES[text_language([])] == "en"


@pytest.mark.parametrize(
    ("text", "word"),
    [
        ("Ibadan, the city of dreams", "city"),
        ("Toronto born and raised", "born"),
        ("Kumasi, orange and green forever", "orange"),
        ("Lagos — hustle, providence and jollof", "providence"),
    ],
)
def test_ordinary_word_in_running_text_has_a_low_prior(resolver, text, word):
    mentions = resolver.mentions(resolver.normalize(text))
    priors = {m.text: m.prior for m in mentions}
    assert priors[word] < 0.5
    assert max(priors.values()) > 0.9  # the place the text names stays strong


def test_a_word_typed_alone_or_introduced_is_a_place(resolver):
    for text, word in [("Nice", "nice"), ("backyard in Cairns", "cairns")]:
        mentions = resolver.mentions(resolver.normalize(text))
        assert {m.text: m.prior for m in mentions}[word] > 0.8, text


@pytest.mark.parametrize(
    ("text", "country"),
    [
        ("Ibadan, the city of dreams", "NG"),
        ("Bergen and proud of it", "NO"),
        ("Kisumu — hustling with the crew", "KE"),
        ("Toronto born and raised", "CA"),
        ("Gdańsk, reading by the sea", "PL"),
    ],
)
def test_a_weak_reading_does_not_veto_a_strong_one(resolver, text, country):
    res = _answer(resolver, text)
    assert res.reason is not Reason.SEVERAL_COUNTRIES
    assert res.country == country


def test_two_strong_places_still_make_several_countries(resolver):
    assert _answer(resolver, "Paris / London").reason is Reason.SEVERAL_COUNTRIES
    assert _answer(resolver, "Paris & Nice").country == "FR"


def test_a_common_word_read_as_a_province_is_not_matched(resolver):
    # "the Valley" is a province of the Dominican Republic only by translation.
    for text in ("the Valley", "The Bay"):
        assert _answer(resolver, text).status is not Status.MATCHED, text


# -- qualifiers in context --------------------------------------------------------
def test_abbreviation_table_names_real_countries():
    assert COUNTRY_ABBREVIATIONS["sa"] == "ZA"
    for text, cc in COUNTRY_ABBREVIATIONS.items():
        assert pycountry.countries.get(alpha_2=cc) is not None, text


@pytest.mark.parametrize(
    ("text", "country", "subdivision"),
    [
        ("Pretoria, SA", "ZA", "ZA-GP"),
        ("Adelaide SA", "AU", "AU-SA"),
        ("Jeddah, KSA", "SA", "SA-02"),
        ("Pune MH", "IN", "IN-MH"),
        ("Geraldton WA", "AU", "AU-WA"),
        ("Porto Alegre RS", "BR", "BR-RS"),
        ("London ON", "CA", "CA-ON"),
        ("Dover DE", "US", "US-DE"),
        ("Split, CRO", "HR", "HR-17"),
    ],
)
def test_a_code_after_a_city_takes_the_reading_of_that_city(resolver, text, country, subdivision):
    res = _answer(resolver, text)
    assert (res.country, res.subdivision) == (country, subdivision)
    assert pycountry.subdivisions.get(code=subdivision) is not None
    assert res.status is Status.MATCHED


def test_an_abbreviation_alone_is_not_read_as_the_informal_country(resolver):
    assert _answer(resolver, "SA").country != "ZA"


def test_misspelt_city_followed_by_its_country(resolver):
    res = _answer(resolver, "Liverpol, UK")
    assert (res.country, res.city) == ("GB", "Liverpool")


# -- the current place ------------------------------------------------------------
def test_cue_table_has_roles_and_positions():
    assert {role for _, role, _ in PLACE_CUES} == {"current", "former", "place"}
    assert {pos for _, _, pos in PLACE_CUES} == {"before", "after"}
    languages = {row["language"] for row in csv.DictReader(open(_gazetteer("place_cues.csv")))}
    assert {"en", "es", "pt", "fr", "de", "it", "nl", "ru", "zh"} <= languages


def _gazetteer(name: str) -> Path:
    return Path(__file__).parents[1] / "gazetteer" / name


@pytest.mark.parametrize(
    ("text", "country", "city"),
    [
        ("from Tamale, living in Hamburg", "DE", "Hamburg"),
        ("ex-Medellín, now Madrid", "ES", "Madrid"),
        ("born in Lille · based in Québec City", "CA", "Québec"),
        ("Kampala → Berlin", "DE", "Berlin"),
        ("ahora en Quito (antes Lima)", "EC", "Quito"),
        ("Delhi born, Sydney based", "AU", "Sydney"),
    ],
)
def test_cue_words_decide_the_current_place(resolver, text, country, city):
    res = _answer(resolver, text)
    assert (res.country, res.city, res.reason) == (country, city, Reason.CURRENT_PLACE)


def test_single_place_with_cue_keeps_its_reason(resolver):
    for text, country in [("jetzt in Graz", "AT"), ("actuellement à Dakar", "SN")]:
        res = _answer(resolver, text)
        assert res.country == country and res.reason is not Reason.CURRENT_PLACE


def test_without_a_current_cue_places_in_two_countries_stay_in_review(resolver):
    for text in ("Lagos / London", "from Chennai, working in Singapore"):
        assert _answer(resolver, text).reason is Reason.SEVERAL_COUNTRIES, text


def test_cue_roles_read_words_before_and_after(resolver):
    query = resolver.normalize("Hanoi-born, Melbourne-based")
    roles = cue_roles(query, resolver.mentions(query))
    assert sorted(roles.values()) == ["current", "former"]


# -- not a place against an unknown place ----------------------------------------------
@pytest.mark.parametrize(
    "text",
    [
        "under my desk",
        "in the cloud",
        "https://example.dev",
        "~/code",
        "DROP TABLE x",
        "@somebody",
        "<div>",
        "C:\\Users\\Public",
    ],
)
def test_text_without_a_place_word_is_junk(resolver, text):
    res = _answer(resolver, text)
    assert (res.status, res.reason) == (Status.NOT_A_PLACE, Reason.JUNK)
    assert res.confidence == 1.0


@pytest.mark.parametrize("text", ["Dunmarrow", "Quillbrook", "42 Elm Street"])
def test_a_name_the_index_does_not_know_is_no_match(resolver, text):
    res = _answer(resolver, text)
    assert (res.status, res.reason) == (Status.UNMATCHED, Reason.NO_MATCH)


def test_ordinary_and_code_text_helpers():
    assert ordinary_text(normalize("behind the fridge"))
    assert not ordinary_text(normalize("Dunmarrow"))
    assert code_text(normalize("/usr/local/bin"))
    assert not code_text(normalize("Lagos"))


def test_a_handle_that_is_a_place_is_the_place(resolver):
    assert _answer(resolver, "@lagos").country == "NG"


# -- fictional places --------------------------------------------------------------
@pytest.mark.parametrize(
    "text",
    [
        "Hogsmeade",
        "Rivendell",
        "Duckburg",
        "Hill Valley",
        "Hogwarts, Scotland",
        "Wakanda forever",
        "Rivendell, Middle-earth",
    ],
)
def test_a_fictional_name_anywhere_wins_over_a_partial_real_reading(resolver, text):
    res = _answer(resolver, text)
    assert (res.status, res.reason) == (Status.NOT_A_PLACE, Reason.FICTIONAL)


def test_fictional_table_marks_additions():
    rows = list(csv.DictReader(open(_gazetteer("fictional.csv"), encoding="utf-8")))
    added = [r for r in rows if r["note"] == "from memory"]
    assert added and all(r["text"] == r["text"].lower() for r in added)


# -- confidence of bare names ---------------------------------------------------------
def test_dominant_bare_city_outranks_a_balanced_one(resolver):
    dominant = [_answer(resolver, t) for t in ("Sydney", "Moscow", "Vienna")]
    assert all(r.status is Status.MATCHED for r in dominant)
    balanced = _answer(resolver, "toledo")
    assert balanced.status is Status.REVIEW
    assert balanced.confidence < min(r.confidence for r in dominant)


def test_refit_accepts_several_files(tmp_path):
    files = []
    for i, rows in enumerate(
        [[("Lyon", "FR"), ("Osaka", "JP")], [("Lima, Peru", "PE"), ("Perth", "AU")]]
    ):
        path = tmp_path / f"set{i}.csv"
        path.write_text(
            "text,country\n" + "".join(f"{t!r},{c}\n".replace("'", '"') for t, c in rows),
            encoding="utf-8",
        )
        files.append(str(path))
    out = tmp_path / "cal.json"
    refit.main([*files, "--out", str(out)])
    text = out.read_text(encoding="utf-8")
    assert "set0.csv + set1.csv" in text and "per_reason(shrink=" in text


def test_fit_chooses_among_shrink_strengths():
    results = {
        f"t{i}": Resolution(Status.MATCHED, Reason.CITY, "FR", score=0.5 + i / 100)
        for i in range(40)
    }
    labelled = [(f"t{i}", "FR" if i % 3 else "DE") for i in range(40)]
    cal = fit(results, labelled, shrink=(1.0, 100.0), folds=4)
    assert set(cal.cross_validation) == {
        "identity",
        "global",
        "per_reason(shrink=1)",
        "per_reason(shrink=100)",
    }
    assert isinstance(cal, Calibration)


# -- both labelled sets ---------------------------------------------------------------
def _scored(resolver, path: Path):
    rows = list(csv.DictReader(open(path, encoding="utf-8", newline="")))
    answers = resolve_keys(count_keys([r["text"] for r in rows], resolver), resolver=resolver)
    return [(r, answers.results[resolver.key(r["text"])]) for r in rows]


@pytest.mark.parametrize("path", SETS, ids=lambda p: p.name)
def test_accuracy_on_labelled_sets(resolver, path):
    scored = _scored(resolver, path)
    matched = [(g, r) for g, r in scored if r.status is Status.MATCHED]
    tp = sum(1 for g, r in matched if g["country"] and r.country == g["country"])
    positives = sum(1 for g, _ in scored if g["country"])
    assert tp / len(matched) >= 0.985
    assert tp / positives >= 0.95
    nonplace = [(g, r) for g, r in scored if g["kind"] in NOT_A_PLACE_KINDS]
    assert sum(r.status is Status.NOT_A_PLACE for _, r in nonplace) / len(nonplace) >= 0.9
    given = [(g, r) for g, r in scored if r.country]
    ece = expected_calibration_error(
        [r.confidence for _, r in given], [r.country == g["country"] for g, r in given]
    )
    assert ece <= 0.03
