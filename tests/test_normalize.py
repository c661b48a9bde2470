"""The normaliser: flags, separators, noise, postcodes; idempotent and total."""

from __future__ import annotations

import unicodedata

from hypothesis import given, settings
from hypothesis import strategies as st

from geonorm.resolve import normalize as normalize_module
from geonorm.resolve.normalize import NoisePhrases, extract_flags, fold, normalize, normalize_key
from geonorm.resolve.tables import POSTCODE_FORMATS


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


# Text mixing the characters the shortcuts below look for: separators, digits, dots,
# capitals, accents, other scripts and noise words.
_MIXED = st.lists(
    st.sampled_from(
        [
            *"aAbzZ .,-/|;:·+>()'0123456789éøßıÅ・、–—\u0301",
            *("via ", "in ", "based ", "the ", "area", "Ⓐ", "ﬁ", "Ж", "中", "\u200b"),
        ]
    ),
    max_size=12,
).map("".join)


_SEPARATED = ["a,b", "a/b", "a|b", "a;b", "a•b", "a(b", "a]b", "a{b", "a<b", "a،b", "a、b"]
_SEPARATED += ["a・b", "a।b", "a፣b", "a։b", "a:b", "a·b", "a - b", "a—b", "a – b", "a + b"]
_SEPARATED += ["a > b", "lisbon via porto", "a\tb", "a\nb"]


@settings(max_examples=500, deadline=None)
@given(_MIXED | st.sampled_from(_SEPARATED))
def test_text_without_a_separator_character_is_one_part(text):
    if not normalize_module._MAY_SEPARATE.search(text):
        assert normalize_module._HARD_SEP.split(text) == [text]
    if text in _SEPARATED:
        assert len(normalize_module._HARD_SEP.split(text)) == 2


def _fold_char_by_char(text: str) -> str:
    """``fold`` spelt out: every character through NFKC, casefold and ``_fold_char``."""
    text = unicodedata.normalize("NFKC", text).casefold()
    for joiner in ("\u200c", "\u200d", "\u200b", "\u180e"):
        text = text.replace(joiner, "")
    text = "".join(normalize_module._fold_char(c) for c in text)
    text = normalize_module._ACRONYM.sub(lambda m: m.group(0).replace(".", "\x00"), text)
    text = text.replace(".", " ").replace("\x00", ".").replace("'", "")
    text = text.replace("_", " ").replace("-", " ")
    return normalize_module._WS.sub(" ", text).strip(" -")


@settings(max_examples=500, deadline=None)
@given(_MIXED | st.text(max_size=8))
def test_fold_gives_what_folding_each_character_gives(text):
    assert fold.__wrapped__(text) == _fold_char_by_char(text)


def test_character_folds_beyond_the_table_size_are_still_folded(monkeypatch):
    monkeypatch.setattr(normalize_module, "_CHAR_FOLDS_MAX", 0)
    table = normalize_module._CharFolds()
    assert "łódź".translate(table) == "lodz"
    assert not table  # nothing kept


_NOISE_PHRASES = (
    ["based in", "from", "the"],
    ["area", "and surroundings"],
    ["near", "the city of"],
)
_NOISE = NoisePhrases(*_NOISE_PHRASES)


class _EveryWord:
    """A word set holding every word: each text is read by the patterns."""

    def __contains__(self, word: object) -> bool:
        return True

    def isdisjoint(self, words: object) -> bool:
        return False


_NOISE_READ_ALWAYS = NoisePhrases(*_NOISE_PHRASES)
_NOISE_READ_ALWAYS._heads = _NOISE_READ_ALWAYS._tails = _EveryWord()  # type: ignore[assignment]
_NOISE_READ_ALWAYS._anywhere_heads = _EveryWord()  # type: ignore[assignment]


@settings(max_examples=500, deadline=None)
@given(
    st.lists(
        st.sampled_from(["based", "in", "from", "the", "area", "and", "surroundings", "near"])
        | st.sampled_from(["city", "of", "lyon", "perth", "", "x"]),
        max_size=6,
    ).map(" ".join)
)
def test_noise_words_are_looked_for_only_where_a_phrase_may_match(text):
    # Without the shortcut (every text read by the patterns) the answers are the same.
    for noise in (_NOISE, _NOISE_READ_ALWAYS):
        assert noise.strip(text) == _NOISE_READ_ALWAYS.strip(text)
        assert noise.strip_prefix(text) == _NOISE_READ_ALWAYS.strip_prefix(text)
    assert normalize("based in Lyon area", _NOISE).parts[0].key == "lyon"
    assert normalize("the Lyon area", _NOISE).parts[0].lead_key == "lyon area"


def test_postcode_formats_all_need_a_digit():
    # Text without a digit is not searched for postcodes: no format may match one.
    for text in ("eh ayl", "ab cde", "m v l", "d abcd", "sw a aa", "k1a obl"):
        for pattern in POSTCODE_FORMATS.values():
            assert pattern.search(text) is None
    assert normalize("Dublin D02 X285").postcodes == ("IE:d02",)


def test_a_settled_key_is_not_folded_again(monkeypatch):
    key = normalize_key("Vĩnh  CHÂU, Việt Nam")
    assert key in normalize_module._SETTLED
    passes = []
    real = normalize_module._key_pass
    monkeypatch.setattr(normalize_module, "_key_pass", lambda raw: passes.append(raw) or real(raw))
    normalize_module._cached_key.cache_clear()
    assert normalize_key(key) == key
    assert passes == []
    monkeypatch.setattr(normalize_module, "_SETTLED", set())
    assert normalize_key(key) == key
    assert passes == [key, key]  # folded, then checked


def test_words_starting_with_a_letter_are_never_numbers():
    q = normalize("12b Baker Street, 4-5 High St, 221B, 3/5 Ivy Lane, x12")
    keys = [t.key for p in q.parts for t in p.tokens]
    assert "12b" not in keys and "4 5" not in keys and "221b" not in keys and "x12" in keys


def _clean_char_by_char(raw: str) -> tuple[str, list[str]]:
    """``_clean_text`` spelt out: flags out, then every character read alone."""
    raw = raw.replace("\u200b", "").replace("\u180e", "").replace("\u1361", " ")
    text, flags = extract_flags(raw)
    text = "".join(" " if normalize_module._is_dropped_symbol(c) else c for c in text)
    for ch in '#@"!?*~':
        text = text.replace(ch, " ")
    return text, flags


_FLAGGED = st.lists(
    st.sampled_from(
        [
            *"aé#@!?*~|+<>\u06fd\u1361\u200b\ufe0f",
            *("\U0001f1eb\U0001f1f7", "\U0001f1e9", "😀", "\U000e0067"),
            "\U0001f3f4\U000e0067\U000e0062\U000e0073\U000e0063\U000e0074\U000e007f",
        ]
    ),
    max_size=10,
).map("".join)


@settings(max_examples=500, deadline=None)
@given(_FLAGGED | st.text(max_size=10))
def test_text_is_cleaned_as_reading_each_character_cleans_it(text):
    assert normalize_module._clean_text(text) == _clean_char_by_char(text)


def test_symbols_beyond_the_table_size_are_still_dropped(monkeypatch):
    monkeypatch.setattr(normalize_module, "_CHAR_FOLDS_MAX", 0)
    table = normalize_module._DroppedSymbols()
    assert "é😀#x".translate(table) == "é  x"
    assert not table
