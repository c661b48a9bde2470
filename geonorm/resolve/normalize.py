"""Turn a raw location string into a normalised query.

The normaliser never raises and is idempotent: ``normalize(normalize(s).key)``
gives the same key as ``normalize(s)``. It keeps the original text next to the
folded forms, because casing carries meaning (``CAN`` is a country code,
``can`` is a verb).

Steps: Unicode NFKC, flags to ISO codes, other emoji and symbols dropped,
casefold, accent folding for Latin letters, split into parts on hard
separators, noise phrases removed per part, postcodes and street words
recognised.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass
from functools import lru_cache

from .tables import POSTCODE_FORMATS, STREET_SUFFIX_ONLY, STREET_WORDS

__all__ = ["NoisePhrases", "Part", "Query", "Token", "fold", "normalize", "normalize_key"]

# Regional indicator symbols U+1F1E6..U+1F1FF map to A..Z (Unicode TR51, flags).
_RI_BASE = 0x1F1E6
# Subdivision flags: U+1F3F4 WAVING BLACK FLAG, tag letters U+E0061..U+E007A,
# CANCEL TAG U+E007F (Unicode TR51, emoji tag sequences).
_BLACK_FLAG = "\U0001f3f4"
_TAG_CANCEL = "\U000e007f"

# Letters that do not decompose under NFD but readers treat as accented forms
# (common practice in search folding).
_SPECIAL_FOLD = {
    "ø": "o",
    "æ": "ae",
    "œ": "oe",
    "ł": "l",
    "đ": "d",
    "ð": "d",
    "þ": "th",
    "ı": "i",
    "ħ": "h",
    "ŧ": "t",
    "ŋ": "n",
    "ſ": "s",
    "ß": "ss",
    "’": "'",
    "‘": "'",
    "ʻ": "'",
    "ʼ": "'",
    "`": "'",
    "´": "'",
}

# Hard separators: always split a string into parts.
_HARD_SEP = re.compile(r"\s*(?:[,/|;·•()\[\]{}<>\n\t]|\s[-–—]+\s|[–—]+|\s\+\s|\s>\s|\bvia\b)\s*")
_NUMERIC_POSTCODE = re.compile(r"^\d{3,6}(?:-\d{3,4})?$")
_WS = re.compile(r"\s+")
_ACRONYM = re.compile(r"(?<![\w.])(?:\w\.){2,}(?![\w])|(?<![\w.])(?:\w\.\w)(?![\w.])")
_TOKEN = re.compile(r"[\w'.]+(?:-[\w'.]+)*", re.UNICODE)
_NUMBER_LIKE = re.compile(r"[\d\-/]+[a-z]?")  # house and flat numbers: "12", "4b", "3/5"


def _fold_char(ch: str) -> str:
    if ch < "\x80":
        return ch
    special = _SPECIAL_FOLD.get(ch)
    if special is not None:
        return special
    decomposed = unicodedata.normalize("NFD", ch)
    base = decomposed[0]
    if base < "\x80" and all(unicodedata.combining(c) for c in decomposed[1:]):
        return base
    return ch


@lru_cache(maxsize=200_000)
def fold(text: str) -> str:
    """Casefold, fold Latin accents, drop dots and collapse spaces.

    Non-Latin scripts are kept as they are (only casefolded); folding Cyrillic
    or Devanagari marks would merge distinct names.
    """
    text = unicodedata.normalize("NFKC", text).casefold()
    text = text.replace("\u200c", "").replace("\u200d", "")  # zero-width (non-)joiners join
    text = "".join(_fold_char(c) for c in text)
    # Dotted acronyms (L.A., U.K., N.L.) keep their dots: "l.a." is not "la".
    text = _ACRONYM.sub(lambda m: m.group(0).replace(".", "\x00"), text)
    text = text.replace(".", " ").replace("\x00", ".").replace("'", "")
    text = text.replace("_", " ").replace("-", " ")
    return _WS.sub(" ", text).strip(" -")


_KEPT_SYMBOLS = frozenset("|+<>")  # separators, split on later


def _is_dropped_symbol(ch: str) -> bool:
    """Emoji, pictographs and other symbols that never spell a place."""
    if ch in _KEPT_SYMBOLS:
        return False
    cat = unicodedata.category(ch)
    if cat in ("So", "Sk", "Sm", "Cs", "Co", "Cn", "Cf", "Cc") and ch not in "\n\t":
        return True
    return 0xFE00 <= ord(ch) <= 0xFE0F  # variation selectors


def extract_flags(text: str) -> tuple[str, list[str]]:
    """Replace flag emoji by spaces; return the text and the ISO codes found."""
    codes: list[str] = []
    out: list[str] = []
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        o = ord(ch)
        if (
            _RI_BASE <= o <= _RI_BASE + 25
            and i + 1 < n
            and _RI_BASE <= ord(text[i + 1]) <= _RI_BASE + 25
        ):
            codes.append(chr(o - _RI_BASE + 65) + chr(ord(text[i + 1]) - _RI_BASE + 65))
            out.append(" ")
            i += 2
            continue
        if ch == _BLACK_FLAG:
            j = i + 1
            tag = []
            while j < n and 0xE0020 <= ord(text[j]) <= 0xE007E:
                tag.append(chr(ord(text[j]) - 0xE0000))
                j += 1
            if j < n and text[j] == _TAG_CANCEL:
                j += 1
            if len(tag) >= 3:
                raw = "".join(tag).upper()
                codes.append(f"{raw[:2]}-{raw[2:]}")
            out.append(" ")
            i = j
            continue
        out.append(ch)
        i += 1
    return "".join(out), codes


@dataclass(frozen=True)
class Token:
    key: str  # folded form used for lookups
    orig: str  # as typed (after NFKC), keeps case and accents


@dataclass(frozen=True)
class Part:
    tokens: tuple[Token, ...]
    full_key: str = ""  # the folded part before noise removal ("bay area")
    street: bool = False  # a street line of an address: not matched against places
    lead_key: str = (
        ""  # the folded part with only its leading noise removed ("the bay area" → "bay area")
    )

    @property
    def key(self) -> str:
        return " ".join(t.key for t in self.tokens)


@dataclass(frozen=True)
class Query:
    raw: str
    key: str  # cache key: canonical text (see normalize_key)
    folded: str  # the whole text folded for lookups, flags and emoji out
    parts: tuple[Part, ...]  # after noise removal
    flags: tuple[str, ...] = ()  # ISO codes from flag emoji
    postcodes: tuple[str, ...] = ()
    has_letters: bool = False


class NoisePhrases:
    """Noise phrases by position: removed at the start, end or anywhere of a part."""

    def __init__(self, prefix: list[str], suffix: list[str], anywhere: list[str]) -> None:
        def alternation(phrases: list[str]) -> str:
            keys = sorted({fold(p) for p in phrases if fold(p)}, key=len, reverse=True)
            return "|".join(re.escape(k) for k in keys) or r"(?!x)x"

        self._prefix = re.compile(rf"^(?:(?:{alternation(prefix)})\s+)+(?=\S)")
        self._suffix = re.compile(rf"(?<=\S)(?:\s+(?:{alternation(suffix)}))+$")
        self._anywhere = re.compile(rf"(?:^|\s)(?:{alternation(anywhere)})(?=\s|$)")

    def strip_prefix(self, key: str) -> str:
        """Only the leading noise ("the Bay Area" → "Bay Area", whose last word is also noise)."""
        return self._prefix.sub("", key).strip()

    def strip(self, key: str) -> str:
        """Remove noise around a part; a part that is nothing but noise stays as it is
        ("AU" is Australia's code, not the French article)."""
        previous = None
        while previous != key:
            previous = key
            key = self._anywhere.sub(" ", key).strip() or key
            key = self._prefix.sub("", key).strip()
            key = self._suffix.sub("", key).strip()
        return key


_EMPTY_NOISE = NoisePhrases([], [], [])


def _clean_text(raw: str) -> tuple[str, list[str]]:
    """Flags out (returned as ISO codes), emoji and stray symbols to spaces."""
    text, flags = extract_flags(raw)
    text = "".join(" " if _is_dropped_symbol(c) else c for c in text)
    for ch in '#@"!?*~':
        text = text.replace(ch, " ")
    return text, flags


_SHORT_CAPS = re.compile(r"\b[A-Z]{2,3}\b")


@lru_cache(maxsize=500_000)
def normalize_key(raw: str) -> str:
    """The canonical form of a raw value; everything the resolver reads comes from it.

    Unicode NFKC, zero-width joiners removed, casefolded, whitespace collapsed.
    Two things survive that matter for reading: accents (Vietnamese "Áo" is
    Austria, "ao" may be Angola's code) and capitals in two- or three-letter
    words ("CAN" is a country code, "can" a verb). Case and spacing variants
    share a key; the resolver's answer is a function of the key alone.
    """
    if raw.isascii():  # the common case: NFKC changes nothing, casefold is lower
        text = raw
        caps = {m.start(): m.group(0) for m in _SHORT_CAPS.finditer(text)}
        folded = text.lower()
    else:
        text = unicodedata.normalize("NFKC", raw).replace("\u200c", "").replace("\u200d", "")
        caps = {m.start(): m.group(0) for m in _SHORT_CAPS.finditer(text)}
        folded = unicodedata.normalize(
            "NFKC", text.casefold()
        )  # NFKC again: casefold may decompose
    if caps and len(folded) == len(text):
        chars = list(folded)
        for start, word in caps.items():
            chars[start : start + len(word)] = word
        folded = "".join(chars)
    return _WS.sub(" ", folded).strip()


def _is_street(words: list[str]) -> bool:
    """A street line of an address: a street word anywhere, or a suffix-only one after a name."""
    return any(w in STREET_WORDS for w in words) or any(w in STREET_SUFFIX_ONLY for w in words[1:])


def _take_postcodes(text: str, postcodes: list[str]) -> str:
    """Postcodes whose shape names the country ("EH8 9YL" → "GB:eh8") into ``postcodes``;
    returns the text with them blanked."""
    for country, pattern in POSTCODE_FORMATS.items():
        for m in pattern.finditer(text):
            if any(c.isdigit() for c in m.group(0)) and any(c.isalpha() for c in m.group(0)):
                postcodes.append(f"{country}:{m.group(1)}")
        text = pattern.sub(
            lambda m: " " if any(c.isalpha() for c in m.group(0)) else m.group(0), text
        )
    return text


def _tokens(text: str, chunk: str, postcodes: list[str]) -> list[Token]:
    """The words of ``text`` with their typed forms from ``chunk``; numeric postcodes go
    into ``postcodes``, house numbers and other numbers are dropped."""
    orig_by_key: dict[str, str] = {}
    for w in _TOKEN.findall(chunk):
        orig_by_key.setdefault(fold(w), w.strip("."))
    tokens = []
    for word in text.split():
        word = word.strip("'-+<>|")
        if not word:
            continue
        if _NUMERIC_POSTCODE.match(word):
            postcodes.append(word)
        elif not (word.isdigit() or _NUMBER_LIKE.fullmatch(word)):
            tokens.append(Token(word, orig_by_key.get(word, word)))
    return tokens


def _part(chunk: str, noise: NoisePhrases, postcodes: list[str]) -> Part | None:
    """One part between hard separators, noise removed; None when no word is left."""
    folded = fold(chunk)
    stripped = noise.strip(folded)
    if not stripped:
        return None
    tokens = _tokens(_take_postcodes(stripped, postcodes), chunk, postcodes)
    if not tokens:
        return None
    return Part(tuple(tokens), folded, _is_street(folded.split()), noise.strip_prefix(folded))


def normalize(raw: object, noise: NoisePhrases | None = None) -> Query:
    """Normalise one raw value. Never raises; non-strings become empty queries."""
    if not isinstance(raw, str):
        raw = "" if raw is None else str(raw)
    key = normalize_key(raw)
    text, flags = _clean_text(key)
    noise = noise or _EMPTY_NOISE
    parts: list[Part] = []
    postcodes: list[str] = []
    for chunk in _HARD_SEP.split(text):
        if chunk and chunk.strip():
            part = _part(chunk, noise, postcodes)
            if part is not None:
                parts.append(part)
    has_letters = any(c.isalpha() for c in key) or bool(flags)
    return Query(raw, key, fold(text), tuple(parts), tuple(flags), tuple(postcodes), has_letters)
