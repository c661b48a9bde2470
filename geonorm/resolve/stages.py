"""The cascade's stages. Each exact stage has one contract (``Stage``):

    stage.resolve(query, spans) -> list[Mention]

A mention is a stretch of the text with its readings (places it can mean).
The resolver runs the not-a-place filter, then the stages in order (flags,
postcodes, country, subdivision, city); ``mentions.py`` merges their mentions,
tries spelling-tolerant matching (``FuzzyMatcher``) on words they left
unexplained and prunes readings; ``decide.py`` weighs what remains.
"""

from __future__ import annotations

import re
from collections.abc import Container, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from typing import TYPE_CHECKING, Protocol

from rapidfuzz import process
from rapidfuzz.distance import OSA

from .index import ORIGINS, NameHit, Place, PlaceIndex, letter_mask
from .normalize import Part, Query
from .tables import (
    BARE_POSTAL_COUNTRIES,
    COUNTRY_ABBREVIATIONS,
    LOWER_WORD_CODES,
    STOPWORDS,
    UNSAFE_ALPHA3,
)
from .tuning import FUZZY_MIN_LEN, KIND_WEIGHT, MIN_WEIGHT, ORIGIN_WEIGHT, OTHER_ORIGIN_WEIGHT

if TYPE_CHECKING:
    import numpy as np
    from numpy.typing import NDArray

__all__ = [
    "AbbreviationStage",
    "CityStage",
    "CountryStage",
    "FlagStage",
    "FuzzyMatcher",
    "Mention",
    "NotAPlaceFilter",
    "PostcodeStage",
    "Reading",
    "Segmenter",
    "Span",
    "Stage",
    "SubdivisionStage",
]

# Scripts written without spaces between words: Han, Kana, Hangul runs, Thai,
# Lao, Khmer, Myanmar. Names inside them are found by longest substring match.
_CJK = re.compile(
    r"[\u0e00-\u0eff\u1000-\u109f\u1780-\u17ff\u3040-\u30ff\u3400-\u4dbf\u4e00-\u9fff"
    r"\uac00-\ud7af]"
)
_IPV4 = re.compile(r"^\d{1,3}(?:[ .]\d{1,3}){3}$")
# Bounded repeats: a megabyte-long cell must not make the search quadratic.
_URL = re.compile(r"(?:https?|www)\b|\.(?:com|org|net|io|dev)\b|[\w.+-]{1,64}@[\w-]{1,64}\.\w")
_KEY_ROWS = ("qwertyuiop", "asdfghjkl", "zxcvbnm", "1234567890")
# Runs of five or more keys along a row ("asdfg"): what ``_looks_like_junk`` looks for.
_KEY_RUNS = frozenset(
    row[i:j] for row in _KEY_ROWS for i in range(len(row)) for j in range(i + 5, len(row) + 1)
)
_NOT_WORD = re.compile(r"[^\w\s]")
_SPACES = re.compile(r"\s+")


def _may_be_url(text: str) -> bool:
    """False when ``_URL`` cannot match: each of its forms holds one of these."""
    return "." in text or "@" in text or "www" in text or "http" in text


@dataclass(frozen=True)
class Reading:
    """One place a mention can mean."""

    place: Place
    origin: str  # name origin (name, alias, code2, postal, alt …) or flag / postcode
    weight: float  # see ``place_weight``; flags and postcodes weigh 1
    similarity: float = 1.0  # 1.0 exact; typo matches carry 1 − edits / length


_new = object.__new__


def _reading(place: Place, origin: str, weight: float) -> Reading:
    """``Reading(place, origin, weight)``, made faster than by the frozen dataclass's
    ``__init__`` (the stages make many); the same object."""
    reading = _new(Reading)
    reading.__dict__.update(place=place, origin=origin, weight=weight, similarity=1.0)
    return reading


@dataclass
class Mention:
    """A stretch of the text and the places it can mean.

    ``part`` is the index of the comma- or slash-separated part of the text and
    ``start`` the word the mention starts at; flags and postcodes, which belong to
    the whole text, have ``part`` −1.
    """

    text: str
    part: int
    start: int
    readings: list[Reading] = field(default_factory=list)
    source: str = "name"  # flag | postcode | name | fuzzy
    # How likely the stretch is meant as a place at all, not as an ordinary word
    # ("city" in "the city of dreams"); set by ``mentions.gather``.
    prior: float = 1.0

    def with_readings(self, readings: list[Reading]) -> Mention:
        """This mention with other readings (``dataclasses.replace``, without its cost:
        a field added above must be added here too)."""
        return Mention(self.text, self.part, self.start, readings, self.source, self.prior)

    @property
    def is_point(self) -> bool:
        return any(r.place.kind == "city" for r in self.readings) and not self.is_container

    @property
    def is_container(self) -> bool:
        return all(
            r.place.kind in ("country", "subdivision", "area", "region") for r in self.readings
        )


@dataclass
class Span:
    """The words ``start:end`` of part ``part``, a name the index knows, and its hits."""

    part: int
    start: int
    end: int
    key: str
    hits: tuple[NameHit, ...]


class Stage(Protocol):
    """An exact stage of the cascade: the mentions it finds in a query.

    ``spans`` is the segmentation of the query into known names (``Segmenter``);
    stages that read the whole text (flags, postcodes) ignore it.
    """

    name: str

    def resolve(self, query: Query, spans: Sequence[Span]) -> list[Mention]: ...


def place_weight(place: Place, origin: str) -> float:
    """Population (floored) times trust in the name's origin times trust in the place kind."""
    return (
        max(float(place.pop), MIN_WEIGHT)
        * ORIGIN_WEIGHT.get(origin, OTHER_ORIGIN_WEIGHT)
        * KIND_WEIGHT[place.kind]
    )


class Segmenter:
    """Cover each part with the longest names the index knows (greedy, left to right)."""

    max_words = 6

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index
        # Distinct texts share most of their parts: each part is segmented once per
        # process (a pure function of the part).
        self._covers = lru_cache(maxsize=20_000)(self._cover)

    def _lookup(self, key: str) -> tuple[NameHit, ...]:
        hits = self.index.lookup(key)
        if not hits and "." in key:
            hits = self.index.lookup(key.replace(".", ""))
        return hits

    def spans(self, query: Query) -> list[Span]:
        # A name with separators in it ("Korea, Republic of"): the whole text first.
        if len(query.parts) > 1 and not query.flags:
            hits = self._lookup(query.folded)
            if hits:
                return [Span(0, 0, len(query.parts[0].tokens), query.folded, hits)]
        out: list[Span] = []
        for pi, part in enumerate(query.parts):
            out.extend(self._part_spans(pi, part))
        return out

    def _part_spans(self, pi: int, part: Part) -> list[Span]:
        return [Span(pi, s.start, s.end, s.key, s.hits) for s in self._covers(part)]

    def _cover(self, part: Part) -> list[Span]:
        """The spans of one part (numbered as part 0)."""
        pi = 0
        words = [t.key for t in part.tokens]
        # The part as typed, before noise removal, may itself be a name ("Bay Area"),
        # and so may a long part ("Các Tiểu Vương quốc Ả Rập Thống nhất"). A part that
        # looks like a street line is read only when it is a country's name ("Regne Unit").
        for key in dict.fromkeys((part.full_key, part.lead_key, part.key)):
            if len(key.split()) > 1:
                hits = self._lookup(key)
                if part.street:
                    hits = tuple(h for h in hits if h.place.kind == "country")
                if hits:
                    return [Span(pi, 0, len(words), key, hits)]
        if part.street:
            return []
        spans: list[Span] = []
        i = 0
        while i < len(words):
            found = None
            for j in range(min(len(words), i + self.max_words), i, -1):
                # A stopword alone is no name, unless typed in capitals at the end of
                # its part ("London ON", "Dover DE").
                if (
                    j - i == 1
                    and words[i] in STOPWORDS
                    and len(words) > 1
                    and not (0 < i == len(words) - 1 and part.tokens[i].orig.isupper())
                ):
                    continue
                key = " ".join(words[i:j])
                hits = self._lookup(key)
                if hits:
                    found = Span(pi, i, j, key, hits)
                    break
            if found is None and _CJK.search(words[i]):
                spans.extend(self._cjk_spans(pi, i, words[i]))
                i += 1
                continue
            if found is None:
                i += 1
                continue
            spans.append(found)
            i = found.end
        return spans

    def _cjk_spans(self, pi: int, wi: int, word: str) -> list[Span]:
        """Greedy longest-match inside a run of CJK text without spaces."""
        spans = []
        i = 0
        while i < len(word):
            for j in range(min(len(word), i + 10), i + 1, -1):
                hits = self.index.lookup(word[i:j])
                if hits:
                    spans.append(Span(pi, wi, wi + 1, word[i:j], hits))
                    i = j
                    break
            else:
                i += 1
        return spans


class NotAPlaceFilter:
    """Empty cells, placeholders, junk and fictional places: the first step of the cascade.

    ``classify`` returns the kind (empty, placeholder, junk, fictional) or '' for
    text that may name a place; a kind ends the cascade.
    """

    def __init__(self, index: PlaceIndex) -> None:
        self.table = index.nonplace
        self.fictional = frozenset(k for k, kind in self.table.items() if kind == "fictional")
        # A run of words is looked up only from a word that starts a fictional name.
        self._fictional_heads = frozenset(k.split(" ")[0] for k in self.fictional)

    def fictional_names(self, query: Query, longest: int = 4) -> list[str]:
        """Fictional names anywhere in the text ("Hogwarts, Scotland"): runs of up to
        ``longest`` words, within a part or across the whole text."""
        runs = [p.full_key.split() for p in query.parts]
        runs.append(_NOT_WORD.sub(" ", query.folded).split())
        heads = self._fictional_heads
        found: list[str] = []
        for words in runs:
            if heads.isdisjoint(words):
                continue
            for n in range(min(longest, len(words)), 0, -1):
                for i in range(len(words) - n + 1):
                    if words[i] not in heads:
                        continue
                    key = " ".join(words[i : i + n])
                    if key in self.fictional and key not in found:
                        found.append(key)
        return found

    def classify(self, query: Query) -> str:
        raw = query.key
        if not raw:
            return "empty"
        if query.coordinates or query.zones:
            return ""  # a position or a time-zone name is a place, whatever surrounds it
        if not query.has_letters:
            return "placeholder" if len(raw) <= 3 else "junk"
        if query.flags:
            return ""  # a flag is a place, whatever words surround it
        if query.offsets and not query.parts and not query.postcodes:
            return "junk"  # a bare UTC offset ("UTC+2") names no place
        folded, joined = query.folded, " ".join(p.key for p in query.parts)
        keys = {folded, _NOT_WORD.sub(" ", folded).strip(), joined}
        # The folded text and its parts' words are single-spaced already.
        keys |= {k if k is folded or k is joined else _SPACES.sub(" ", k).strip() for k in keys}
        for k in keys - {""}:
            kind = self.table.get(k)
            if kind:
                return "placeholder" if kind == "empty_like" else kind
        return "junk" if _looks_like_junk(query) else ""


def _looks_like_junk(query: Query) -> bool:
    """An IP address, a URL or e-mail address, a keyboard run or one letter repeated."""
    bare = query.folded.replace(" ", "")
    if _IPV4.match(query.folded) or (_may_be_url(query.key) and _URL.search(query.key)):
        return True
    if bare in _KEY_RUNS and bare.isalpha():
        return True
    return len(bare) >= 3 and bare.count(bare[0]) == len(bare)


class FlagStage:
    """Flag emoji: a country, or a subdivision for the tag flags (Scotland, Wales)."""

    name = "flag"

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    def resolve(self, query: Query, spans: Sequence[Span] = ()) -> list[Mention]:
        out = []
        for code in query.flags:
            place = (
                self.index.countries.get(code)
                if "-" not in code
                else self.index.subdivisions.get(code)
            )
            if place is None:  # the EU and UN flags name regions, not countries
                place = next(
                    (h.place for h in self.index.lookup(code.lower()) if h.place.kind == "region"),
                    None,
                )
            if place is not None:
                out.append(Mention(code, -1, 0, [Reading(place, "flag", 1.0)], source="flag"))
        return out


class PostcodeStage:
    """Postcodes: the area their prefix names, else the country their format belongs to."""

    name = "postcode"

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    def resolve(self, query: Query, spans: Sequence[Span] = ()) -> list[Mention]:
        out = []
        for pc in query.postcodes:
            if ":" not in pc:
                continue
            fmt, code = pc.split(":", 1)
            letters = re.match(r"[a-z]*", code).group(0)  # type: ignore[union-attr]
            prefix = letters if fmt == "GB" else code[:1]
            pid = self.index.postcodes.get(f"{fmt}:{prefix}")
            if pid is None and fmt in self.index.countries:
                place = self.index.countries[fmt]
            elif pid is not None:
                place = self.index.place(pid)
            else:
                continue
            out.append(Mention(pc, -1, 0, [Reading(place, "postcode", 1.0)], source="postcode"))
        return out


class _SpanStage:
    """Shared logic of the exact-name stages: keep the readings of one place kind."""

    name = ""
    kinds: tuple[str, ...] = ()

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index
        self._kinds = frozenset(self.kinds)

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        return True

    def checked(self, span: Span) -> Container[str]:
        """The origins of the span's names that ``allowed`` may refuse; a name of any
        other origin is allowed without asking (a stage that overrides ``allowed``
        overrides this too)."""
        return ()

    def resolve(self, query: Query, spans: Sequence[Span]) -> list[Mention]:
        out = []
        allowed, kinds = self.allowed, self._kinds
        for span in spans:
            checked = self.checked(span)
            best: dict[int, Reading] = {}  # one reading per place: its strongest allowed name
            for h in span.hits:
                place = h.place
                if place.kind in kinds and (h.origin not in checked or allowed(query, span, h)):
                    weight = place_weight(place, h.origin)
                    kept = best.get(place.id)
                    if kept is None or weight > kept.weight:
                        best[place.id] = _reading(place, h.origin, weight)
            if best:
                out.append(Mention(span.key, span.part, span.start, list(best.values())))
        return out


def _typed(query: Query, span: Span) -> str:
    part = query.parts[span.part]
    return " ".join(t.orig for t in part.tokens[span.start : span.end])


def _code_allowed(query: Query, span: Span, origin: str, country: str = "") -> bool:
    """Codes and abbreviations are read only where a person would write one."""
    typed = _typed(query, span)
    key = span.key.replace(".", "")
    whole = len(query.parts) == 1 and len(query.parts[0].tokens) == span.end - span.start
    own_part = len(query.parts[span.part].tokens) == span.end - span.start
    later = span.part > 0 or span.start > 0
    upper = typed.replace(".", "").isupper()
    if not typed.replace(".", "").isascii():
        return False  # "Áo" is Austria in Vietnamese, not Angola's code
    if origin == "code2":
        if key in LOWER_WORD_CODES and not upper and not whole:
            return False
        return whole or upper or (own_part and later)
    if origin == "code3":
        return upper or (key not in UNSAFE_ALPHA3 and (whole or own_part))
    return _subdivision_code_allowed(key, origin, upper, whole, later, country)


def _subdivision_code_allowed(
    key: str, origin: str, upper: bool, whole: bool, later: bool, country: str
) -> bool:
    """Postal abbreviations and ISO subdivision code suffixes (``_code_allowed``)."""
    if origin == "sub_code":
        return upper and later
    if key in LOWER_WORD_CODES and not upper:
        return False
    if len(key) <= 3:
        # Alone, a short abbreviation is read as a state only where people write
        # their state that way (US, Canada, Australia); elsewhere it is a country code.
        return later or (whole and country in BARE_POSTAL_COUNTRIES)
    return True


_COUNTRY_CODES = frozenset({"code2", "code3"})  # the origins ``CountryStage.allowed`` reads
_SUBDIVISION_CODES = frozenset({"postal", "sub_code"})  # and ``SubdivisionStage.allowed``
_ALL_BUT_ALIAS = frozenset(ORIGINS) - {"alias"}


class CountryStage(_SpanStage):
    name = "country"
    kinds = ("country",)

    def checked(self, span: Span) -> Container[str]:
        return _COUNTRY_CODES

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        if hit.origin in ("code2", "code3"):
            return _code_allowed(query, span, hit.origin)
        return True


class AbbreviationStage:
    """Informal and sports abbreviations of countries ("Pretoria, SA", "Split, CRO"),
    read only after another word, where they qualify a place; a reading the place
    before them does not fit leaves them to their other meanings."""

    name = "abbreviation"

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    def resolve(self, query: Query, spans: Sequence[Span] = ()) -> list[Mention]:
        out = []
        for pi, part in enumerate(query.parts):
            for i, token in enumerate(part.tokens):
                cc = COUNTRY_ABBREVIATIONS.get(token.key.replace(".", ""))
                place = self.index.countries.get(cc) if cc else None
                if place is None or (pi == 0 and i == 0):
                    continue
                typed = token.orig.replace(".", "")
                if typed.isupper() or len(part.tokens) == 1:
                    reading = Reading(place, "abbreviation", place_weight(place, "abbreviation"))
                    out.append(Mention(token.key, pi, i, [reading]))
        return out


class SubdivisionStage(_SpanStage):
    name = "subdivision"
    kinds = ("subdivision", "area", "region")

    def checked(self, span: Span) -> Container[str]:
        return _SUBDIVISION_CODES

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        if hit.origin in ("postal", "sub_code"):
            return _code_allowed(query, span, hit.origin, hit.place.cc)
        return True


class CityStage(_SpanStage):
    name = "city"
    kinds = ("city",)

    def checked(self, span: Span) -> Container[str]:
        # ``allowed`` refuses only names of two letters or fewer, never an alias.
        if len(span.key.replace(".", "")) <= 2 and span.key.isascii():
            return _ALL_BUT_ALIAS
        return ()

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        # An alias for a city written in capitals (NYC, KL) is fine; a
        # two-letter alternate name is not.
        if hit.origin == "alias":
            return True
        if len(span.key.replace(".", "")) <= 2 and span.key.isascii():
            # Two capitals are a code, not the village of "As";
            # two-letter alternate names are noise.
            return hit.origin != "alt" and not _typed(query, span).isupper()
        return True


class FuzzyMatcher:
    """Typo-tolerant match of words no exact stage explained (run by ``mentions.py``).

    Blocked by first letter and only over places of 15,000+ people, countries
    and subdivisions, so it stays fast and never fires on short tokens.
    """

    min_len = FUZZY_MIN_LEN

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index
        # A pure function of the phrase: each is matched once per process.
        self._matches = lru_cache(maxsize=20_000)(self._readings)

    @staticmethod
    def max_edits(text: str) -> int:
        """Edits tolerated (insert, delete, substitute, swap neighbours).

        1 up to 8 letters, then 2.
        """
        return 1 if len(text) <= 8 else 2

    def match(self, phrase: str, pi: int, start: int) -> Mention | None:
        readings = self._matches(phrase)
        if readings is None:
            return None
        return Mention(phrase, pi, start, list(readings), source="fuzzy")

    def _readings(self, phrase: str) -> tuple[Reading, ...] | None:
        """The places closest in spelling to ``phrase`` (not itself), or None."""
        limit = self.max_edits(phrase)
        keys, targets = self.index.fuzzy_block(phrase[0], len(phrase), limit)
        if not keys:
            return None
        # Only names whose letters are near enough can be within ``limit`` edits
        # (``letter_mask``); the others are never compared. Kept in block order, so
        # ties rank as over the whole block.
        near = _near_letters(self.index.fuzzy_masks(phrase[0], len(phrase), limit), phrase, limit)
        choices = [keys[i] for i in near]
        matches = process.extract(phrase, choices, scorer=OSA.distance, score_cutoff=limit, limit=8)
        matches = [m for m in matches if m[0] != phrase]
        if not matches:
            return None
        best = min(m[1] for m in matches)
        readings = []
        for key, dist, j in matches:
            if dist > best:
                continue
            pid, origin = targets[near[j]]
            place = self.index.place(pid)
            similarity = 1.0 - dist / max(len(phrase), len(key))
            readings.append(Reading(place, origin, place_weight(place, origin), similarity))
        return tuple(readings)

    def match_free_words(self, query: Query, covered: set[tuple[int, int]]) -> list[Mention]:
        """Mentions for runs of words outside ``covered`` ((part, word) pairs) and stopwords."""
        out = []
        for pi, part in enumerate(query.parts):
            words = [t.key for t in part.tokens]
            if part.street:
                continue
            free = [
                i for i in range(len(words)) if (pi, i) not in covered and words[i] not in STOPWORDS
            ]
            for run in _runs(free):
                phrase = " ".join(words[i] for i in run)
                if len(phrase.replace(" ", "")) < self.min_len or not phrase.isascii():
                    continue
                m = self.match(phrase, pi, run[0])
                if m is not None:
                    out.append(m)
        return out


def _near_letters(masks: NDArray[np.uint64], phrase: str, edits: int) -> list[int]:
    """Positions of the ``masks`` (``letter_mask``) that differ from ``phrase``'s in at
    most ``2 * edits`` bits: the names that may be within ``edits`` edits of it."""
    import numpy as np

    differ = np.bitwise_count(masks ^ np.uint64(letter_mask(phrase)))
    return (differ <= 2 * edits).nonzero()[0].tolist()


def _runs(indices: list[int]) -> list[list[int]]:
    """Consecutive runs of ascending word indices: [1, 2, 4] → [[1, 2], [4]]."""
    runs: list[list[int]] = []
    for i in indices:
        if runs and runs[-1][-1] == i - 1:
            runs[-1].append(i)
        else:
            runs.append([i])
    return runs
