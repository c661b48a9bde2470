"""From the stages' raw mentions to the mentions the decision weighs.

Three steps, in order (``gather``):

1. Merge: the exact-name stages read the same span of text; their readings of
   one span become one mention (``merge_by_span``).
2. Spelling: words no exact stage explained, and whole parts explained only by
   small places, get spelling-tolerant matching (``FuzzyMatcher``); a close
   spelling of a whole part beats the pieces it was explained by.
3. Prune: readings a reader would not consider are dropped (``prune``).
"""

from __future__ import annotations

import math
import re
import struct
import sys
from array import array
from bisect import bisect_left
from collections.abc import Callable, Iterable, Sequence
from dataclasses import replace
from functools import lru_cache
from operator import attrgetter

from .normalize import Part, Query, fold
from .stages import FuzzyMatcher, Mention, Reading, Span
from .tables import PLACE_CUES, STOPWORDS
from .tuning import (
    CITY_BESIDE_AREA_POP,
    CITY_BESIDE_COUNTRY_POP,
    FAME_TYPICAL,
    FIRM_PLACE_POP,
    FIRM_TOWN_POP,
    HAMLET_POP,
    HOME_LANGUAGE_BONUS,
    HOME_PLACE_POP,
    INTRODUCED_RENOWN,
    MAIN_NAME_OVER_TRANSLATION_POP,
    MAIN_NAME_POP,
    ORDINARY_CONTEXT,
    ORDINARY_SCALE,
    ORDINARY_WORD_ZIPF,
    ORDINARY_ZIPF_BASE,
    ORDINARY_ZIPF_SLOPE,
    RESPELL_ADVANTAGE,
    RUNNING_TEXT_SHIFT,
    VARIANT_DEMOTION,
)

__all__ = [
    "LANGUAGES",
    "code_text",
    "cue_roles",
    "gather",
    "load_words",
    "merge_by_span",
    "ordinary_text",
    "place_prior",
    "prune",
    "text_language",
    "word_zipf",
]

_WEIGHT = attrgetter("weight")
# Where a mention sits: (part, first word, text).
SpanKey = tuple[int, int, str]
# A word of the text: (part, word).
Word = tuple[int, int]


def gather(
    query: Query, spans: Sequence[Span], found: Iterable[Mention], fuzzy: FuzzyMatcher
) -> list[Mention]:
    """The mentions of one text, from what the stages ``found`` over ``spans``.

    Mentions of the whole text (flags, postcodes) come first, in stage order,
    then the mentions of spans in text order.
    """
    whole_text: list[Mention] = []
    in_spans: list[Mention] = []
    for m in found:
        (whole_text if m.part < 0 else in_spans).append(m)
    by_span = merge_by_span(in_spans)
    weak = weak_parts(by_span.values())
    covered = covered_words(query, spans, by_span)
    for pi in weak:
        covered -= _words_of(query, pi)
    respelt = fuzzy.match_free_words(query, covered)
    for pi, part in enumerate(query.parts):
        if pi in weak or part.street or len(part.tokens) < 2:
            continue  # no whole part to respell (``_has_loose_words``)
        whole = _respell_whole_part(query, pi, part, by_span, covered, fuzzy)
        if whole is not None:
            weak.add(pi)
            respelt = [m for m in respelt if m.part != pi] + [whole]
    if respelt:
        _replace_weak(by_span, _misspelt(query, respelt), weak)
    kept = prune(whole_text + sorted(by_span.values(), key=_POSITION))
    typed = [_typed_words(query, m) for m in kept]
    return weigh_words(
        query, [_as_typed(query, m, t) for m, t in zip(kept, typed, strict=True)], typed
    )


_POSITION = attrgetter("part", "start")


def _reweighed(r: Reading, factor: float) -> Reading:
    """``r`` with its weight times ``factor`` (``dataclasses.replace``, without its cost:
    a field added to ``Reading`` must be added here too)."""
    return Reading(r.place, r.origin, r.weight * factor, r.similarity)


def _as_typed(query: Query, m: Mention, typed_words: list[str] | None = None) -> Mention:
    """Accents typed are meant: where a place is called exactly as typed ("Münster"),
    towns and provinces whose name is the same without the accents (Ireland's
    Munster) are demoted. ``typed_words`` are the mention's ``_typed_words``."""
    if typed_words is None:
        typed_words = _typed_words(query, m)
    typed = " ".join(typed_words).casefold()
    if typed.isascii() or not fold(typed).isascii():
        return m  # no accents, or another script: nothing to tell apart
    bare = fold(typed)

    def unaccented(r: Reading) -> bool:
        name = r.place.name
        return r.place.kind in ("city", "subdivision") and name.isascii() and fold(name) == bare

    if not any(r.place.name.casefold() == typed for r in m.readings):
        return m
    return m.with_readings(
        [_reweighed(r, VARIANT_DEMOTION) if unaccented(r) else r for r in m.readings]
    )


def _misspelt(query: Query, respelt: list[Mention]) -> list[Mention]:
    """Respellings of words that are not themselves words: a single word of the
    text's language spelt right ("Saturn") is not a misspelt place ("Satun"). A
    phrase is still respelt though its pieces are words ("Buenos Aries")."""
    if not respelt:
        return respelt
    lang = -1  # the text's language, read only for a word common in some language

    def spelt_right(m: Mention) -> bool:
        nonlocal lang
        words = _typed_words(query, m)
        if len(words) != 1:
            return False
        zipf = word_zipf(words[0])
        if max(zipf) < ORDINARY_WORD_ZIPF:
            return False  # not an ordinary word in any language
        if lang < 0:
            lang = text_language(t.orig for p in query.parts for t in p.tokens)
        return zipf[lang] >= ORDINARY_WORD_ZIPF

    return [m for m in respelt if not spelt_right(m)]


def merge_by_span(mentions: Iterable[Mention]) -> dict[SpanKey, Mention]:
    """One mention per span: later stages' readings of a span join the first stage's.

    A span read by one stage keeps that stage's mention; the mentions given are never
    changed."""
    by_span: dict[SpanKey, Mention] = {}
    merged: set[SpanKey] = set()  # keys whose mention is a copy made here
    for m in mentions:
        key = (m.part, m.start, m.text)
        first = by_span.get(key)
        if first is None:
            by_span[key] = m
            continue
        if key not in merged:
            merged.add(key)
            first = by_span[key] = first.with_readings(list(first.readings))
        first.readings.extend(m.readings)
    return by_span


def covered_words(
    query: Query, spans: Sequence[Span], by_span: dict[SpanKey, Mention]
) -> set[Word]:
    """The words some exact stage explained.

    A single span that is the whole text (a name with separators in it, "Korea,
    Republic of") explains every word.
    """
    if len(spans) == 1 and spans[0].key == query.folded and by_span:
        return {
            (pi, i) for pi in range(len(query.parts)) for i in range(len(query.parts[pi].tokens))
        }
    covered: set[Word] = set()
    for s in spans:
        if (s.part, s.start, s.key) in by_span:
            covered.update([(s.part, i) for i in range(s.start, s.end)])
    return covered


def _words_of(query: Query, pi: int) -> set[Word]:
    return {(pi, i) for i in range(len(query.parts[pi].tokens))}


def _is_firm(r: Reading) -> bool:
    """A reading that explains its words for sure: no respelling is tried instead."""
    return (
        r.place.kind in ("country", "subdivision", "area", "region")
        or r.origin == "alias"
        or (r.origin == "name" and r.place.pop >= FIRM_TOWN_POP)
    )


def weak_parts(mentions: Iterable[Mention]) -> set[int]:
    """Parts explained only by small places met by a secondary name.

    Such a part may be a misspelt big place ("Johannesberg" is a German village);
    a part with a big place, a container, a nickname or a sizeable town met by its
    own name is taken as written.
    """
    parts: set[int] = set()
    firm: set[int] = set()
    for m in mentions:
        parts.add(m.part)
        if m.part not in firm and any(
            r.place.pop >= FIRM_PLACE_POP or _is_firm(r) for r in m.readings
        ):
            firm.add(m.part)
    return parts - firm


def _respell_whole_part(
    query: Query,
    pi: int,
    part: Part,
    by_span: dict[SpanKey, Mention],
    covered: set[Word],
    fuzzy: FuzzyMatcher,
) -> Mention | None:
    """A close spelling of a whole part explained only in pieces ("Ne York" → York).

    Returned when it outweighs every exact reading of the part by
    ``RESPELL_ADVANTAGE``; else None.
    """
    if not _has_loose_words(pi, part, covered):
        return None
    if len(part.key) < fuzzy.min_len or not part.key.isascii():
        return None
    whole = fuzzy.match(part.key, pi, 0)
    if whole is None:
        return None
    pieces = max(
        (r.weight for k, m in by_span.items() if k[0] == pi for r in m.readings), default=0.0
    )
    if max(r.weight for r in whole.readings) >= RESPELL_ADVANTAGE * pieces:
        return whole
    return None


def _has_loose_words(pi: int, part: Part, covered: set[Word]) -> bool:
    """A part of several words, not a street line, with a word nothing explained."""
    if part.street or len(part.tokens) < 2:
        return False
    words = [t.key for t in part.tokens]
    return any((pi, i) not in covered and w not in STOPWORDS for i, w in enumerate(words))


def _replace_weak(by_span: dict[SpanKey, Mention], respelt: list[Mention], weak: set[int]) -> None:
    """Respelt mentions replace the exact mentions of weak parts (in place)."""
    for fm in respelt:
        for key in [k for k in by_span if k[0] == fm.part and k[0] in weak]:
            del by_span[key]
    for fm in respelt:
        by_span[(fm.part, fm.start, fm.text)] = fm


# -- pruning ------------------------------------------------------------------
# Each rule maps a mention's readings (and whether the text has several
# mentions) to the readings a reader would still consider.
Rule = Callable[[list[Reading], bool], list[Reading]]


def _country_named(readings: list[Reading], several: bool) -> list[Reading]:
    """A country name outweighs towns and provinces of the same name elsewhere
    (Lebanon, PA); only very large cities and strong names survive next to it."""
    named = {
        r.place.cc
        for r in readings
        if r.place.kind == "country" and r.origin in ("name", "alias", "flag")
    }
    if not named:
        return readings
    return [
        r
        for r in readings
        if r.place.cc in named
        or (
            (r.place.kind != "city" or r.place.pop >= CITY_BESIDE_COUNTRY_POP)
            and r.origin not in ("lower_sub", "translation", "alt", "short")
        )
    ]


def _iso_code(readings: list[Reading], several: bool) -> list[Reading]:
    """Three capitals that are an ISO code: the country, not a town or a state."""
    if not any(r.origin == "code3" for r in readings):
        return readings
    return [
        r for r in readings if r.origin not in ("postal", "sub_code") and r.place.kind != "city"
    ]


def _area_named(readings: list[Reading], several: bool) -> list[Reading]:
    """A world region or named area outweighs small towns (Middle East, MD) and the
    districts named like it (APAC is a region, not Uganda's Apac district)."""
    if not any(r.place.kind in ("region", "area") for r in readings):
        return readings
    return [
        r
        for r in readings
        if r.place.kind not in ("city", "subdivision")
        or (r.place.kind == "city" and r.place.pop >= CITY_BESIDE_AREA_POP)
    ]


def _main_name(readings: list[Reading], several: bool) -> list[Reading]:
    """A large place called exactly this outweighs places that only carry the name as
    a variant or former name (Islamabad, not Chittagong's old name), and a country
    whose name this is only in another language (Salvador, Bahia)."""
    main = 0  # the largest city called exactly this (only its reaching the bars counts)
    for r in readings:
        if r.origin == "name" and r.place.kind == "city" and r.place.pop > main:
            main = r.place.pop
    if main < MAIN_NAME_POP:
        return readings

    def demoted(r: Reading) -> bool:
        if r.origin in ("alt", "short") and r.place.kind == "city":
            return True
        return (
            r.origin == "translation"
            and r.place.kind == "country"
            and main >= MAIN_NAME_OVER_TRANSLATION_POP
        )

    if not any(map(demoted, readings)):
        return readings
    return [_reweighed(r, VARIANT_DEMOTION) if demoted(r) else r for r in readings]


def _nickname(readings: list[Reading], several: bool) -> list[Reading]:
    """A curated nickname beats a code of the same letters (KL, LA, DC)."""
    if not any(r.origin == "alias" for r in readings):
        return readings
    return [r for r in readings if r.origin not in ("code2", "code3", "postal", "sub_code")]


def _hamlet_variant(readings: list[Reading], several: bool) -> list[Reading]:
    """In longer texts, hamlets met only by an alternate name are noise (a street
    word, "one", "plot")."""
    if not several:
        return readings
    return [
        r
        for r in readings
        if not (
            r.place.kind == "city" and r.origin in ("alt", "short") and r.place.pop < HAMLET_POP
        )
    ]


PRUNE_RULES: tuple[Rule, ...] = (
    _country_named,
    _iso_code,
    _area_named,
    _main_name,
    _nickname,
    _hamlet_variant,
)


# What a mention's readings must hold for each rule to change anything: some reading
# of one of the kinds (None: any kind) and some reading of one of the origins (None:
# any origin). Rules only drop readings or change their weights, so a rule whose
# trigger the mention's readings lack leaves them as they are whatever ran before it.
_TRIGGERS: dict[Rule, tuple[frozenset[str] | None, frozenset[str] | None]] = {
    _country_named: (frozenset({"country"}), frozenset({"name", "alias", "flag"})),
    _iso_code: (None, frozenset({"code3"})),
    _area_named: (frozenset({"region", "area"}), None),
    _main_name: (frozenset({"city"}), frozenset({"name"})),
    _nickname: (None, frozenset({"alias"})),
    _hamlet_variant: (frozenset({"city"}), frozenset({"alt", "short"})),
}


@lru_cache(maxsize=1024)
def _rules_for(kinds: frozenset[str], origins: frozenset[str]) -> tuple[Rule, ...]:
    """The rules of ``PRUNE_RULES`` that may change readings of these kinds and origins."""
    rules = []
    for rule in PRUNE_RULES:
        trigger_kinds, trigger_origins = _TRIGGERS.get(rule, (None, None))
        if (trigger_kinds is None or not trigger_kinds.isdisjoint(kinds)) and (
            trigger_origins is None or not trigger_origins.isdisjoint(origins)
        ):
            rules.append(rule)
    return tuple(rules)


@lru_cache(maxsize=1024)
def _rules_for_one(kind: str, origin: str) -> tuple[Rule, ...]:
    """``_rules_for`` a single reading of this kind and origin, but ``_main_name``: it
    demotes readings beside a large city's own name, which a single reading lacks."""
    rules = _rules_for(frozenset([kind]), frozenset([origin]))
    return tuple(rule for rule in rules if rule is not _main_name)


def prune(mentions: list[Mention]) -> list[Mention]:
    """Apply ``PRUNE_RULES`` in order to each mention; drop mentions left without readings."""
    several = len(mentions) > 1
    out = []
    for m in mentions:
        readings = m.readings
        if len(readings) == 1:  # most mentions: no sets to build
            rules = _rules_for_one(readings[0].place.kind, readings[0].origin)
        else:
            kinds = frozenset([r.place.kind for r in readings])
            origins = frozenset([r.origin for r in readings])
            rules = _rules_for(kinds, origins)
        for rule in rules:
            readings = rule(readings, several)
        if not readings:
            continue
        out.append(m if readings is m.readings else m.with_readings(readings))
    return out


# -- the word prior -----------------------------------------------------------
# Languages whose ordinary words are told apart from place names (wordfreq's small
# lists of the languages the noise phrases cover most); the first is the default.
LANGUAGES = ("en", "es", "pt", "fr", "de", "it", "nl")
# Words that make a phrase a description ("the valley"), not a name.
_ARTICLES = frozenset({"the", "a", "an"})
_NOT_CONTENT = STOPWORDS | _ARTICLES
# Codes: trusted only when typed in capitals.
_CODE_ORIGINS = frozenset({"code2", "code3", "postal", "sub_code", "abbreviation"})
# Name origins that are curated or gated by casing elsewhere: never ordinary words.
_TRUSTED_ORIGINS = frozenset(
    {"alias", "flag", "postcode", "region", "code2", "code3", "postal", "sub_code", "abbreviation"}
)


class _ZipfTable:
    """Word → Zipf value in each of ``LANGUAGES``: the words, sorted and joined by
    newlines, and one flat run of doubles, ``len(LANGUAGES)`` per word.

    The first ``SEARCHED_WORDS`` words are searched for in the text itself, so that a
    process that reads a few words (one lookup) does not split the list; later ones
    are found by bisection in the sorted list. Both find the same row.
    """

    def __init__(self, words: str, values: bytes | memoryview) -> None:
        self.text = f"\n{words}\n"
        self.sorted: list[str] | None = None
        self.searched = 0
        self.values = values
        self.row = struct.Struct(f"<{len(LANGUAGES)}d")

    def get(self, word: str) -> tuple[float, ...]:
        i = self._row(word)
        if i < 0:
            return _NOT_A_WORD
        return self.row.unpack_from(self.values, i * self.row.size)

    def _row(self, word: str) -> int:
        if self.sorted is None and self.searched < SEARCHED_WORDS:
            self.searched += 1
            at = self.text.find(f"\n{word}\n")
            return -1 if at < 0 else self.text.count("\n", 0, at)
        if self.sorted is None:
            self.sorted = self.text[1:-1].split("\n")
        i = bisect_left(self.sorted, word)
        return i if i < len(self.sorted) and self.sorted[i] == word else -1


SEARCHED_WORDS = 16  # words searched in the text before the list is split (see _ZipfTable)
_TABLE_FORMAT = 2  # of the file the merged lists are kept in (see _zipf_table)


def _wordfreq_version() -> str:
    """The installed wordfreq's version, from its ``.dist-info`` folder name when there
    is one on the path (importing ``importlib.metadata`` costs more than the table)."""
    import glob
    import os

    for folder in sys.path:
        found = glob.glob(os.path.join(glob.escape(folder or "."), "wordfreq-*.dist-info"))
        if len(found) == 1:
            return os.path.basename(found[0])[len("wordfreq-") : -len(".dist-info")]
    from importlib.metadata import version

    return version("wordfreq")


@lru_cache(maxsize=1)
def _zipf_table() -> _ZipfTable:
    """wordfreq's small lists of ``LANGUAGES``, merged.

    Reading seven lists costs more than half a second per process, so the merged
    table is kept beside the place index (``wordfreq-<version>-….bin`` in the data
    folder, written once, atomically) and loaded from there in a few milliseconds:
    the length of the words' UTF-8 text (8 bytes, little-endian), that text, then
    the values as little-endian doubles.
    """
    import os

    from ..paths import data_dir

    languages = "-".join(LANGUAGES)
    path = data_dir() / f"wordfreq-{_wordfreq_version()}-{languages}-{_TABLE_FORMAT}.bin"
    try:
        data = path.read_bytes()
        (size,) = struct.unpack_from("<Q", data)
        values = memoryview(data)[8 + size :]
        if len(values) % (8 * len(LANGUAGES)) == 0:
            return _ZipfTable(data[8 : 8 + size].decode("utf-8"), values)
    except (OSError, struct.error, UnicodeDecodeError):
        pass
    from wordfreq import get_frequency_dict

    lists = [get_frequency_dict(lang, wordlist="small") for lang in LANGUAGES]
    ordered = sorted(set().union(*lists))
    flat = array(
        "d",
        (math.log10(f[w]) + 9 if f.get(w, 0) > 0 else 0.0 for w in ordered for f in lists),
    )
    if sys.byteorder == "big":
        flat.byteswap()
    words = "\n".join(ordered)
    encoded = words.encode("utf-8")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_bytes(struct.pack("<Q", len(encoded)) + encoded + flat.tobytes())
        os.replace(tmp, path)
    except OSError:
        pass  # a read-only data folder: the lists are read again next time
    return _ZipfTable(words, flat.tobytes())


_NOT_A_WORD = (0.0,) * len(LANGUAGES)


def load_words() -> None:
    """Load the word table now, not at the first word (a pool forked afterwards shares it)."""
    _zipf_table()


@lru_cache(maxsize=100_000)
def word_zipf(word: str) -> tuple[float, ...]:
    """How common ``word`` (as typed, any case) is in each of ``LANGUAGES``, on the
    Zipf scale (log10 of uses per billion words; 0 for words outside the lists)."""
    return _zipf_table().get(word.casefold().strip(".'-"))


@lru_cache(maxsize=100_000)
def _top_zipf(word: str) -> float:
    """How common ``word`` is in the language where it is commonest."""
    return max(word_zipf(word))


def text_language(words: Iterable[str]) -> int:
    """The index in ``LANGUAGES`` of the language whose ordinary words ``words`` are
    most likely to be (English when nothing tells)."""
    totals = [0.0] * len(LANGUAGES)
    for w in words:
        for i, z in enumerate(word_zipf(w)):
            totals[i] += z
    return totals.index(max(totals))  # ties go to the earlier language


def _typed_words(query: Query, m: Mention) -> list[str]:
    """The words of mention ``m`` as typed (for a whole-text mention, the text's)."""
    if m.part < 0 or m.part >= len(query.parts):
        return []
    tokens = query.parts[m.part].tokens
    n = len(m.text.split())
    typed = [t.orig for t in tokens[m.start : m.start + n]]
    return typed or m.text.split()


def _content_zipf(words: list[str], lang: int) -> float:
    """How ordinary a phrase is: as ordinary as its rarest content word."""
    content = [w for w in words if w.casefold() not in _NOT_CONTENT] or words
    return min((word_zipf(w)[lang] for w in content), default=0.0)


def _renown(readings: Iterable[Reading]) -> float:
    """How much the places a mention can name are written about: the heaviest reading,
    a city's weight scaled by how many names GeoNames knows it by."""
    best = 0.0
    for r in readings:
        if r.origin == "lower_sub":
            continue  # a district's name does not make its region famous ("Reading")
        w = r.weight
        if r.place.kind == "city":
            w *= (1 + r.place.fame) / (1 + FAME_TYPICAL)
        best = max(best, w)
    return best


@lru_cache(maxsize=512)
def _official_languages(cc: str) -> frozenset[str]:
    """The languages of country ``cc``, official or de facto (CLDR, via babel)."""
    from babel.languages import get_official_languages

    return frozenset(get_official_languages(cc, de_facto=True))


def _at_home(readings: Iterable[Reading], lang: str) -> bool:
    """Whether the heaviest reading is a sizeable place where ``lang`` is spoken: such
    places are written about most in their own language ("Paris" is commoner in
    French). English, written everywhere, gets no such allowance."""
    best = max(readings, key=_WEIGHT, default=None)
    return (
        best is not None
        and best.place.pop >= HOME_PLACE_POP
        and lang in _official_languages(best.place.cc)
    )


def _trusted(m: Mention, typed: list[str]) -> bool:
    """Flags, postcodes, curated names and codes typed in capitals are never ordinary
    words ("man" may be the Manitoba abbreviation, "MAN" is)."""
    if m.source in ("flag", "postcode"):
        return True
    origins = {r.origin for r in m.readings} & _TRUSTED_ORIGINS
    if not origins:
        return False
    if not origins <= _CODE_ORIGINS:
        return True  # a curated name: trusted however typed
    return all(w.replace(".", "").isupper() for w in typed)


def _named_with_article(m: Mention) -> bool:
    """Whether the place the mention most likely names carries the article in its own
    name ("The Hague", "The Gambia")."""
    best = max(m.readings, key=_WEIGHT, default=None)
    return best is not None and fold(best.place.name).split(" ", 1)[0] == m.text.split()[0]


def _context(query: Query, m: Mention, covered: set[Word], introduced: bool = False) -> str:
    """How the mention sits in the text: "alone" (the first part names only places
    once noise phrases such as "based in" are removed), "aside" (so does a later
    part: "Quito, man"), "lead" (it opens the text, words follow: people write the
    place first), "running" (among words that name nothing, or led by an article:
    "the valley"). Case is not read: texts that
    differ only in case share one answer."""
    words = m.text.split()
    if introduced:
        return "alone"
    if len(words) > 1 and words[0] in _ARTICLES and not _named_with_article(m):
        return "running"
    if not 0 <= m.part < len(query.parts):
        return "alone"
    lead = m.part == 0 and m.start == 0
    part = query.parts[m.part]
    tokens = part.tokens
    before = tokens[m.start - 1].key if m.start > 0 else part.full_key.split(" ", 1)[0]
    if before in _ARTICLES and before not in words:
        return "running"
    around = any(
        (m.part, i) not in covered and t.key not in STOPWORDS and any(c.isalnum() for c in t.key)
        for i, t in enumerate(tokens)
    )
    if not around:
        return "alone" if m.part == 0 else "aside"
    return "lead" if lead else "running"


def place_prior(
    query: Query, m: Mention, lang: int, covered: set[Word], introduced: bool = False
) -> float:
    """How likely mention ``m`` is meant as a place rather than an ordinary word.

    A word's chance of being an ordinary word grows with how common it is in the
    text's language, beyond what the size and fame of the places it can name
    explain ("Paris" is common because the city is famous; "city" and "desk" are
    common as words). It counts most in running text ("the city of dreams"), less
    at the head of the text ("Split is nice in summer") and little when a part is
    nothing but the name or a word such as "in" or "près de" introduces a
    well-known place: a person who types one word into a location field most likely
    means a place.
    """
    typed = _typed_words(query, m)
    if _trusted(m, typed):
        return 1.0
    z = _content_zipf(typed, lang)
    if z <= 0:
        return 1.0
    renown = _renown(m.readings)
    expected = ORDINARY_ZIPF_BASE + ORDINARY_ZIPF_SLOPE * math.log10(max(renown, 1.0))
    if lang and _at_home(m.readings, LANGUAGES[lang]):
        expected += HOME_LANGUAGE_BONUS
    context = _context(query, m, covered, introduced and renown >= INTRODUCED_RENOWN)
    if context == "running":
        expected -= RUNNING_TEXT_SHIFT
    ordinary = 1.0 / (1.0 + math.exp(-(z - expected) / ORDINARY_SCALE))
    return 1.0 - ordinary * ORDINARY_CONTEXT[context]


def _free_words(query: Query, mentions: Sequence[Mention]) -> list[str]:
    """The typed words of the text outside its mentions (noise words included)."""
    inside = {w for m in mentions for w in m.text.split()}
    return [w for p in query.parts for w in p.full_key.split() if w not in inside]


def _words_of_mentions(mentions: Iterable[Mention]) -> set[Word]:
    return {(m.part, m.start + i) for m in mentions for i in range(len(m.text.split()))}


def _may_be_ordinary(query: Query, m: Mention, typed: list[str] | None = None) -> bool:
    """Whether the mention could be an ordinary word at all: not trusted, and common
    enough in some language, against the renown of its places, to matter (most place
    names are in no list; "Berlin" is common, but the city more so). ``typed`` are the
    mention's ``_typed_words``."""
    if typed is None:
        typed = _typed_words(query, m)
    if len(typed) == 1:  # most mentions: one word, its own content
        z = _top_zipf(typed[0])
    else:
        content = [w for w in typed if w.casefold() not in _NOT_CONTENT] or typed
        z = min(map(_top_zipf, content), default=0.0)
    if z <= 0 or _trusted(m, typed):  # most place names are in no list: checked first
        return False
    renown = ORDINARY_ZIPF_BASE + ORDINARY_ZIPF_SLOPE * math.log10(max(_renown(m.readings), 1.0))
    return z - (renown - RUNNING_TEXT_SHIFT) > -4 * ORDINARY_SCALE


def weigh_words(
    query: Query, mentions: list[Mention], typed: Sequence[list[str]] | None = None
) -> list[Mention]:
    """Each mention with its ``prior`` of naming a place (``place_prior``).

    Two passes: first every other mention counts as words around a mention; then
    only the mentions that are likely places do ("Paris & Nice" names two places;
    in "Toronto born and raised", "born" stands in running text). ``typed`` are the
    mentions' ``_typed_words``, in order.
    """
    if typed is None:
        typed = [_typed_words(query, m) for m in mentions]
    todo = [
        i
        for i, (m, t) in enumerate(zip(mentions, typed, strict=True))
        if _may_be_ordinary(query, m, t)
    ]
    if not todo:
        return mentions  # every prior stays 1
    lang = text_language(_free_words(query, mentions))
    gaps = _gaps(query, mentions)
    keys = [(m.part, m.start, m.text) for m in mentions]
    introduced = [k in gaps and _role(*gaps[k]) != "" for k in keys]
    priors = [1.0] * len(mentions)
    for i in todo:
        priors[i] = place_prior(
            query, mentions[i], lang, _words_of_mentions([mentions[i]]), introduced[i]
        )
    if len(mentions) > 1:
        likely = _words_of_mentions(m for m, p in zip(mentions, priors, strict=True) if p >= 0.5)
        for i in todo:
            own = _words_of_mentions([mentions[i]])
            priors[i] = place_prior(query, mentions[i], lang, likely | own, introduced[i])
    return [
        replace(m, prior=round(p, 4)) if p < 1.0 else m
        for m, p in zip(mentions, priors, strict=True)
    ]


# Tokens that are no words of a language: web and file addresses, markup and code
# (certainly no place), handles and hashtags (a name may follow the sign).
_CODE_TOKEN = re.compile(
    r"^(?:https?://\S*|www\.\S*|~?/\S*|\.{1,2}/\S*|[a-z]:\\\S*|<[^>]*>?|\S*</?\w+>"
    r"|[\w-]+(?:\.[\w-]+)*\.(?:com|org|net|io|dev|app|py|js|ts|html?|txt|exe|sh|json|csv)"
    r"|\S*[{};$\\`]\S*|\S*\(\)\S*)$"
)
# A character each form of ``_CODE_TOKEN`` has.
_CODE_SIGN = re.compile(r"[:./<{};$\\`(]")
_HANDLE = re.compile(r"^[@#]\w+$")
_LETTERS = re.compile(r"[^\W\d_]+")


def code_text(query: Query) -> bool:
    """Whether every token of the text is a web or file address, markup or code."""
    if not _CODE_SIGN.search(query.key):
        return False  # every form of ``_CODE_TOKEN`` has one of these signs
    tokens = query.key.split()
    return bool(tokens) and all(_CODE_TOKEN.match(t) for t in tokens)


def ordinary_text(query: Query) -> bool:
    """Whether the text has no word that could name an unknown place: only ordinary
    words of its language ("under my desk"), handles, web and file addresses, markup
    and code. A rare word (a capitalised name the index does not know), a street
    line or a postcode says no."""
    if query.postcodes or any(p.street for p in query.parts):
        return False  # an address without a city is a place the index does not know
    words: list[str] = []
    for token in query.key.split():
        if not (_CODE_TOKEN.match(token) or _HANDLE.match(token)):
            words.extend(_LETTERS.findall(token))
    if not words:
        return bool(query.key.strip())
    lang = text_language(words)
    return all(
        w in STOPWORDS or len(w) == 1 or word_zipf(w)[lang] >= ORDINARY_WORD_ZIPF for w in words
    )


# -- which place is current ---------------------------------------------------
# Arrows between places point from the former to the current one.
_ARROW = re.compile(r"\s*(?:[→⇒⇨⇢↦⟶⟹➔➙➛➜➝➞➟➠➡➢➣➤⮕]|=>|->|>)\s*")
_NON_WORD = re.compile(r"[^\w→]+")


def _cue_table(position: str) -> tuple[dict[str, str], int]:
    """Cue phrases of one position → role, and the longest phrase in words."""
    cues: dict[str, str] = {}
    for phrase, role, pos in PLACE_CUES:
        if pos == position:
            cues.setdefault(" ".join(_NON_WORD.sub(" ", fold(phrase)).split()), role)
    return cues, max((len(p.split()) for p in cues), default=0)


_CUES_BEFORE, _LONGEST_BEFORE = _cue_table("before")
_CUES_AFTER, _LONGEST_AFTER = _cue_table("after")


@lru_cache(maxsize=4096)
def _role(before: str, after: str) -> str:
    """The role a place takes from the words just before and just after it: current,
    former, place (a word that introduces a place: "in", "près de") or ''. The
    longest cue phrase wins."""
    words = _NON_WORD.sub(" ", before[-80:]).split()
    if words and words[-1] == "→":
        return "current"
    for n in range(min(_LONGEST_BEFORE, len(words)), 0, -1):
        role = _CUES_BEFORE.get(" ".join(words[-n:]))
        if role:
            return role
    words = _NON_WORD.sub(" ", after[:80]).split()
    for n in range(min(_LONGEST_AFTER, len(words)), 0, -1):
        role = _CUES_AFTER.get(" ".join(words[:n]))
        if role:
            return role
    return ""


def _gaps(query: Query, mentions: Sequence[Mention]) -> dict[SpanKey, tuple[str, str]]:
    """For each mention found in the text, the text before it and after it, folded;
    keyed by (part, start, text)."""
    text = fold(_ARROW.sub(" → ", query.key))
    found: list[tuple[SpanKey, int, int]] = []
    cursor = 0
    for m in sorted((m for m in mentions if m.part >= 0), key=lambda m: (m.part, m.start)):
        at = text.find(m.text, cursor)
        if at >= 0:
            found.append(((m.part, m.start, m.text), at, at + len(m.text)))
            cursor = at + len(m.text)
    return {key: (text[:start], text[end:]) for key, start, end in found}


def cue_roles(query: Query, mentions: Sequence[Mention]) -> dict[SpanKey, str]:
    """For each mention, "current" or "former" when cue words say so ("ex-Medellín,
    now Madrid", "Kampala → Berlin", "ahora en Quito (antes Lima)"); keyed by
    (part, start, text). Mentions without such a cue are left out."""
    roles = {}
    for key, (before, after) in _gaps(query, mentions).items():
        role = _role(before, after)
        if role in ("current", "former"):
            roles[key] = role
    return roles
