"""The cascade's stages. Each stage has one contract:

    stage.resolve(query) -> list[Mention]

A mention is a stretch of the text with its ranked readings (places it can
mean). Stages run in order: not-a-place filter, flags, postcodes, country,
subdivision, city (exact), fuzzy city. The resolver then weighs all mentions
together (see ``resolver.py``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from rapidfuzz import process
from rapidfuzz.distance import OSA

from .index import NameHit, Place, PlaceIndex
from .normalize import Part, Query
from .tables import BARE_POSTAL_COUNTRIES, LOWER_WORD_CODES, STOPWORDS, UNSAFE_ALPHA3

__all__ = [
    "STOPWORDS",
    "CityStage",
    "CountryStage",
    "FlagStage",
    "FuzzyStage",
    "Mention",
    "NotAPlaceStage",
    "PostcodeStage",
    "Reading",
    "Segmenter",
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


@dataclass(frozen=True)
class Reading:
    place: Place
    origin: str  # name origin (name, alias, code2, postal, alt …) or flag / postcode
    weight: float
    similarity: float = 1.0  # 1.0 exact; typo matches carry 1 − edits / length


@dataclass
class Mention:
    text: str
    part: int
    start: int
    readings: list[Reading] = field(default_factory=list)
    source: str = "name"  # flag | postcode | name | fuzzy

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
    part: int
    start: int
    end: int
    key: str
    hits: tuple[NameHit, ...]


# Relative trust in a name by where it comes from (common practice: official
# and curated names over alternate spellings and translations).
ORIGIN_WEIGHT = {
    "name": 1.0,
    "alias": 5.0,
    "code2": 1.0,
    "code3": 1.0,
    "sub_code": 0.8,
    "postal": 1.0,
    "translation": 0.8,
    "alt": 0.3,
    "lower_sub": 0.05,
    "adjective": 0.6,
    "region": 1.0,
    "short": 0.2,
}
# A country named in the text is rarely meant as anything else.
KIND_WEIGHT = {"country": 3.0, "subdivision": 1.0, "city": 1.0, "area": 1.0, "region": 1.0}
MIN_WEIGHT = 300.0  # a floor so places with unknown population still count


def place_weight(place: Place, origin: str) -> float:
    return (
        max(float(place.pop), MIN_WEIGHT) * ORIGIN_WEIGHT.get(origin, 0.5) * KIND_WEIGHT[place.kind]
    )


class Segmenter:
    """Cover each part with the longest names the index knows (greedy, left to right)."""

    max_words = 6

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

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
        if part.street:
            return []
        words = [t.key for t in part.tokens]
        # The part as typed, before noise removal, may itself be a name ("Bay Area"),
        # and so may a long part ("Các Tiểu Vương quốc Ả Rập Thống nhất").
        for key in dict.fromkeys((part.full_key, part.lead_key, part.key)):
            if len(key.split()) > 1:
                hits = self._lookup(key)
                if hits:
                    return [Span(pi, 0, len(words), key, hits)]
        spans: list[Span] = []
        i = 0
        while i < len(words):
            found = None
            for j in range(min(len(words), i + self.max_words), i, -1):
                if j - i == 1 and words[i] in STOPWORDS and len(words) > 1:
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


class NotAPlaceStage:
    """Empty cells, placeholders, junk and fictional places. Returns the kind or ''."""

    def __init__(self, index: PlaceIndex) -> None:
        self.table = index.nonplace

    def resolve(self, query: Query) -> str:
        raw = query.key
        if not raw:
            return "empty"
        if not query.has_letters:
            return "placeholder" if len(raw) <= 3 else "junk"
        if query.flags:
            return ""  # a flag is a place, whatever words surround it
        keys = {
            query.folded,
            re.sub(r"[^\w\s]", " ", query.folded).strip(),
            " ".join(p.key for p in query.parts),
        }
        keys |= {re.sub(r"\s+", " ", k).strip() for k in keys}
        for k in keys - {""}:
            kind = self.table.get(k)
            if kind:
                return "placeholder" if kind == "empty_like" else kind
        bare = query.folded.replace(" ", "")
        if _IPV4.match(query.folded) or _URL.search(query.key):
            return "junk"
        if (
            len(bare) >= 5
            and bare.isalpha()
            and bare.isascii()
            and any(bare in row for row in _KEY_ROWS)
        ):
            return "junk"
        if len(bare) >= 3 and len(set(bare)) == 1:
            return "junk"
        return ""


class FlagStage:
    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    def resolve(self, query: Query) -> list[Mention]:
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
    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    def resolve(self, query: Query) -> list[Mention]:
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

    kinds: tuple[str, ...] = ()

    def __init__(self, index: PlaceIndex, segmenter: Segmenter) -> None:
        self.index = index
        self.segmenter = segmenter

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        return True

    def resolve(self, query: Query, spans: list[Span] | None = None) -> list[Mention]:
        spans = self.segmenter.spans(query) if spans is None else spans
        out = []
        for span in spans:
            best: dict[int, Reading] = {}  # one reading per place: its strongest allowed name
            for h in span.hits:
                if h.place.kind in self.kinds and self.allowed(query, span, h):
                    r = Reading(h.place, h.origin, place_weight(h.place, h.origin))
                    if h.place.id not in best or r.weight > best[h.place.id].weight:
                        best[h.place.id] = r
            readings = list(best.values())
            if readings:
                out.append(Mention(span.key, span.part, span.start, readings))
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
    # postal abbreviations and ISO subdivision code suffixes
    if origin == "sub_code":
        return upper and later
    if key in LOWER_WORD_CODES and not upper:
        return False
    if len(key) <= 3:
        # Alone, a short abbreviation is read as a state only where people write
        # their state that way (US, Canada, Australia); elsewhere it is a country code.
        return later or (whole and country in BARE_POSTAL_COUNTRIES)
    return True


class CountryStage(_SpanStage):
    kinds = ("country",)

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        if hit.origin in ("code2", "code3"):
            return _code_allowed(query, span, hit.origin)
        return True


class SubdivisionStage(_SpanStage):
    kinds = ("subdivision", "area", "region")

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        if hit.origin in ("postal", "sub_code"):
            return _code_allowed(query, span, hit.origin, hit.place.cc)
        return True


class CityStage(_SpanStage):
    kinds = ("city",)

    def allowed(self, query: Query, span: Span, hit: NameHit) -> bool:
        # An alias for a city written in capitals (NYC, KL) is fine; a
        # two-letter alternate name is not.
        if hit.origin == "alias":
            return True
        if len(span.key.replace(".", "")) <= 2 and span.key.isascii():
            # Two capitals are a code, not the village of "As"; two-letter alternate names are noise.
            return hit.origin != "alt" and not _typed(query, span).isupper()
        return True


class FuzzyStage:
    """Typo-tolerant match of words no exact stage explained.

    Blocked by first letter and only over places of 15,000+ people, countries
    and subdivisions, so it stays fast and never fires on short tokens.
    """

    min_len = 6

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    @staticmethod
    def max_edits(text: str) -> int:
        """Edits tolerated (insert, delete, substitute, swap neighbours): 1 up to 8 letters, then 2."""
        return 1 if len(text) <= 8 else 2

    def match(self, phrase: str, pi: int, start: int) -> Mention | None:
        limit = self.max_edits(phrase)
        keys, targets = self.index.fuzzy_block(phrase[0], len(phrase), limit)
        if not keys:
            return None
        matches = process.extract(phrase, keys, scorer=OSA.distance, score_cutoff=limit, limit=8)
        matches = [m for m in matches if m[0] != phrase]
        if not matches:
            return None
        best = min(m[1] for m in matches)
        readings = []
        for key, dist, idx in matches:
            if dist > best:
                continue
            pid, origin = targets[idx]
            place = self.index.place(pid)
            similarity = 1.0 - dist / max(len(phrase), len(key))
            readings.append(Reading(place, origin, place_weight(place, origin), similarity))
        return Mention(phrase, pi, start, readings, source="fuzzy")

    def resolve(self, query: Query, covered: set[tuple[int, int]]) -> list[Mention]:
        out = []
        for pi, part in enumerate(query.parts):
            words = [t.key for t in part.tokens]
            if part.street:
                continue
            free = [
                i for i in range(len(words)) if (pi, i) not in covered and words[i] not in STOPWORDS
            ]
            if not free:
                continue
            # Runs of uncovered words, tried as one phrase.
            runs: list[list[int]] = []
            for i in free:
                if runs and runs[-1][-1] == i - 1:
                    runs[-1].append(i)
                else:
                    runs.append([i])
            for run in runs:
                phrase = " ".join(words[i] for i in run)
                if len(phrase.replace(" ", "")) < self.min_len or not phrase.isascii():
                    continue
                m = self.match(phrase, pi, run[0])
                if m is not None:
                    out.append(m)
        return out
