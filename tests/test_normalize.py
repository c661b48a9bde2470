"""The normaliser: flags, separators, noise, postcodes; idempotent and total."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from geonorm.resolve.normalize import NoisePhrases, extract_flags, fold, normalize, normalize_key


def test_fold_keeps_non_latin_scripts_and_folds_accents():
    assert fold("  Zürich ") == "zurich"
    assert fold("Łódź") == "lodz"
    assert fold("Москва") == "москва"
    assert fold("मुंबई") == "मुंबई"  # combining vowel signs are not accents
    assert fold("Nordrhein-Westfalen") == "nordrhein westfalen"


def test_dotted_acronyms_keep_their_dots():
    assert fold("L.A.") == "l.a."
    assert fold("St. Petersburg") == "st petersburg"


def test_regional_indicator_flags_become_alpha2():
    # Unicode TR51: a flag is a pair of regional indicator symbols spelling the ISO code.
    text, codes = extract_flags("Berlin \U0001f1e9\U0001f1ea")
    assert codes == ["DE"] and "Berlin" in text


def test_subdivision_flag_tag_sequence():
    # Unicode TR51 tag sequence: black flag + tag letters "gbsct" + cancel tag.
    scotland = "\U0001f3f4" + "".join(chr(0xE0000 + ord(c)) for c in "gbsct") + "\U000e007f"
    assert normalize(scotland).flags == ("GB-SCT",)


def test_other_emoji_are_dropped():
    q = normalize("📍Medellín 🌞")
    assert [p.key for p in q.parts] == ["medellin"]


def test_separators_split_parts():
    q = normalize("Vienna, Austria / Bratislava | Slovakia; Brno (CZ) · Graz")
    assert [p.key for p in q.parts] == [
        "vienna",
        "austria",
        "bratislava",
        "slovakia",
        "brno",
        "cz",
        "graz",
    ]


def test_noise_phrases_removed_by_position():
    noise = NoisePhrases(
        prefix=["based in", "living in"], suffix=["area", "for now"], anywhere=["currently"]
    )
    q = normalize("Currently living in Greater Oslo area for now", noise)
    assert [p.key for p in q.parts] == ["greater oslo"]
    assert q.parts[0].full_key == "currently living in greater oslo area for now"
    assert normalize("Living in Greater Oslo area", noise).parts[0].lead_key == "greater oslo area"


def test_street_lines_are_marked_and_numbers_dropped():
    q = normalize("12 Baker Street, Flat 4b, London")
    assert [(p.key, p.street) for p in q.parts] == [
        ("baker street", True),
        ("flat", True),
        ("london", False),
    ]
    assert normalize("Baggot St, Dublin").parts[0].street
    assert not normalize("St Helier, Jersey").parts[0].street  # "St" first: a saint


def test_postcodes_recognised_by_format():
    assert normalize("EH8 9YL").postcodes == ("GB:eh8",)
    assert normalize("M5V 3L9").postcodes == ("CA:m5v",)
    assert "75011" in normalize("75011 Paris").postcodes


@settings(max_examples=300, deadline=None)
@given(st.text())
def test_normaliser_is_idempotent_and_never_raises(text):
    first = normalize(text)
    again = normalize(first.key)
    assert again.key == first.key
    assert (again.parts, again.flags, again.postcodes) == (
        first.parts,
        first.flags,
        first.postcodes,
    )


def test_key_keeps_short_capitals_and_accents():
    assert normalize_key("  Toronto,   CAN ") == "toronto, CAN"
    assert normalize_key("Áo") == "áo"
    assert normalize_key("PARIS") == normalize_key("paris")
    # Casefolding decomposes some letters (U+1E96); the key is composed again, so it is stable.
    assert normalize_key(normalize_key("\u1e96olon IL")) == normalize_key("\u1e96olon IL")


@given(st.one_of(st.none(), st.integers(), st.floats(allow_nan=True)))
def test_non_strings_become_queries(value):
    assert isinstance(normalize(value).key, str)
