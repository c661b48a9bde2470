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

from collections.abc import Callable, Iterable, Sequence
from dataclasses import replace

from .normalize import Part, Query
from .stages import FuzzyMatcher, Mention, Reading, Span
from .tables import STOPWORDS
from .tuning import (
    CITY_BESIDE_AREA_POP,
    CITY_BESIDE_COUNTRY_POP,
    FIRM_PLACE_POP,
    FIRM_TOWN_POP,
    HAMLET_POP,
    MAIN_NAME_OVER_TRANSLATION_POP,
    MAIN_NAME_POP,
    RESPELL_ADVANTAGE,
    VARIANT_DEMOTION,
)

__all__ = ["gather", "merge_by_span", "prune"]

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
        if pi in weak:
            continue
        whole = _respell_whole_part(query, pi, part, by_span, covered, fuzzy)
        if whole is not None:
            weak.add(pi)
            respelt = [m for m in respelt if m.part != pi] + [whole]
    _replace_weak(by_span, respelt, weak)
    return prune(whole_text + sorted(by_span.values(), key=lambda m: (m.part, m.start)))


def merge_by_span(mentions: Iterable[Mention]) -> dict[SpanKey, Mention]:
    """One mention per span: later stages' readings of a span join the first stage's."""
    by_span: dict[SpanKey, Mention] = {}
    for m in mentions:
        key = (m.part, m.start, m.text)
        if key in by_span:
            by_span[key].readings.extend(m.readings)
        else:
            by_span[key] = replace(m, readings=list(m.readings))
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
    return {
        (s.part, i)
        for s in spans
        for i in range(s.start, s.end)
        if (s.part, s.start, s.key) in by_span
    }


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
    mentions = list(mentions)
    firm = {
        m.part
        for m in mentions
        if max(r.place.pop for r in m.readings) >= FIRM_PLACE_POP or any(map(_is_firm, m.readings))
    }
    return {m.part for m in mentions} - firm


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
    words = [t.key for t in part.tokens]
    if part.street or len(words) < 2:
        return False
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
    """A world region or named area outweighs small towns (Middle East, MD)."""
    if not any(r.place.kind in ("region", "area") for r in readings):
        return readings
    return [r for r in readings if r.place.kind != "city" or r.place.pop >= CITY_BESIDE_AREA_POP]


def _main_name(readings: list[Reading], several: bool) -> list[Reading]:
    """A large place called exactly this outweighs places that only carry the name as
    a variant or former name (Islamabad, not Chittagong's old name), and a country
    whose name this is only in another language (Salvador, Bahia)."""
    main = max(
        (r.place.pop for r in readings if r.place.kind == "city" and r.origin == "name"),
        default=0,
    )
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

    return [replace(r, weight=r.weight * VARIANT_DEMOTION) if demoted(r) else r for r in readings]


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


def prune(mentions: list[Mention]) -> list[Mention]:
    """Apply ``PRUNE_RULES`` in order to each mention; drop mentions left without readings."""
    several = len(mentions) > 1
    out = []
    for m in mentions:
        readings = m.readings
        for rule in PRUNE_RULES:
            readings = rule(readings, several)
        if readings:
            out.append(replace(m, readings=readings))
    return out
