"""Turn a raw location string into a normalised query.

The normaliser never raises and is idempotent: ``normalize(normalize(s).key)``
gives the same key as ``normalize(s)``. It keeps the original text next to the
folded forms, because casing carries meaning (``CAN`` is a country code,
``can`` is a verb).

Steps: mojibake repaired (UTF-8 read as Latin-1 or Windows-1252 upstream),
Unicode NFKC, coordinates, time-zone names and UTC offsets taken out, flags
to ISO codes, other emoji and symbols dropped, casefold, accent folding for
Latin letters, split into parts on hard separators (Latin, Arabic and CJK
punctuation), noise phrases removed per part, postcodes and street words
recognised.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass
from functools import cached_property, lru_cache

from .coordinates import find_coordinates
from .tables import POSTCODE_FORMATS, STREET_SUFFIX_ONLY, STREET_WORDS
from .timezones import find_offsets, find_zones
from .tuning import MAX_TEXT

__all__ = [
    "NoisePhrases",
    "Part",
    "Query",
    "Token",
    "fold",
    "normalize",
    "normalize_key",
    "repair_mojibake",
]

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

# The Ethiopic wordspace (፡) separates words, like a space: a typed "አዲስ፡አበባ" is
# read as "አዲስ አበባ", the usual form (CLDR's Ge'ez names, written with it, swap North
# and South Korea; they stay apart in the index).
_WORD_SPACES = str.maketrans({"\u1361": " "})
# Hard separators: always split a string into parts. Besides Latin punctuation, the
# Arabic comma, semicolon and full stop (، ؛ ۔), the ideographic comma and full stop
# (、 。) and the katakana middle dot (・), the Devanagari danda (। ॥), the Ethiopic
# comma, full stop and semicolon (፣ ። ፤) and the Armenian full stop (։); full-width
# forms (，；：／（）) arrive here as their ASCII twins after NFKC, so the colon is one
# too ("名古屋：日本", "Berlin:Germany"), except after an Indic letter, where it stands
# for the visarga ("जर्मनीदेश:"), and before a space, where it ends a label that the
# noise phrases remove ("Location: Berlin"). A middle dot before a Shavian letter is
# the namer dot that starts a name, not a separator. "via" between two places is a
# separator ("Lisbon via Porto"); at the head of a part it starts a street ("Via
# Roma 10"). A name written with a separator inside ("ボスニア・ヘルツェゴビナ") is
# still found: the segmenter looks the whole text up first.
_HARD_SEP = re.compile(
    r"\s*(?:[,/|;•()\[\]{}<>\n\t،؛۔、。・।॥፣።፤։]|(?<![\u0900-\u0dff]):(?!\s)"
    r"|·(?![\U00010450-\U0001047f])|\s[-–—]+\s|[–—]+|\s\+\s|\s>\s|(?<=\w)\s+via\b)\s*"
)
# Text without any of these has no hard separator: it is one part, unsplit.
_MAY_SEPARATE = re.compile(r"[,/|;•()\[\]{}<>\n\t،؛۔、。・।॥፣።፤։:·\-–—+]|via")
_NUMERIC_POSTCODE = re.compile(r"^\d{3,6}(?:-\d{3,4})?$")
_WS = re.compile(r"\s+")
_ACRONYM = re.compile(r"(?<![\w.])(?:\w\.){2,}(?![\w])|(?<![\w.])(?:\w\.\w)(?![\w.])")
_TOKEN = re.compile(r"[\w'.]+(?:-[\w'.]+)*", re.UNICODE)
_NUMBER_LIKE = re.compile(r"[\d\-/]+[a-z]?")  # house and flat numbers: "12", "4b", "3/5"
_DIGIT = re.compile(r"\d")


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


class _CharFolds(dict[int, str]):
    """``_fold_char`` by code point for ``str.translate``, filled as characters are met
    (at most ``_CHAR_FOLDS_MAX`` of them are kept)."""

    def __missing__(self, code: int) -> str:
        folded = _fold_char(chr(code))
        if len(self) < _CHAR_FOLDS_MAX:
            self[code] = folded
        return folded


_CHAR_FOLDS_MAX = 50_000  # distinct characters remembered (texts hold a few thousand)
_CHAR_FOLDS = _CharFolds()


@lru_cache(maxsize=200_000)
def fold(text: str) -> str:
    """Casefold, fold Latin accents, drop dots and collapse spaces.

    Non-Latin scripts are kept as they are (only casefolded); folding Cyrillic
    or Devanagari marks would merge distinct names.
    """
    if text.isascii():  # NFKC and letter folding change no ASCII character
        text = text.lower()
    else:
        text = unicodedata.normalize("NFKC", text).casefold()
        # Zero-width (non-)joiners join; a zero-width space only marks a word boundary in
        # scripts written without spaces (Khmer, Thai), inside names too ("កោះ\u200bខូក"),
        # and the Mongolian vowel separator is part of its word.
        text = text.replace("\u200c", "").replace("\u200d", "")
        text = text.replace("\u200b", "").replace("\u180e", "")
        text = text.translate(_CHAR_FOLDS)
    if "." in text:
        # Dotted acronyms (L.A., U.K., N.L.) keep their dots: "l.a." is not "la".
        text = _ACRONYM.sub(lambda m: m.group(0).replace(".", "\x00"), text)
    text = text.replace(".", " ").replace("\x00", ".").replace("'", "")
    text = text.replace("_", " ").replace("-", " ")
    return _WS.sub(" ", text).strip(" -")


def _continuation_chars() -> str:
    """The characters a UTF-8 continuation byte (0x80–0xBF) becomes when read as
    Latin-1 or as Windows-1252."""
    chars = set()
    for b in range(0x80, 0xC0):
        chars.add(chr(b))
        try:
            chars.add(bytes([b]).decode("cp1252"))
        except UnicodeDecodeError:
            continue
    return "".join(sorted(chars))


# Typical mojibake: UTF-8 read as Latin-1 or Windows-1252 ("GÃ¶teborg", "ÐœÐ¾ÑÐºÐ²Ð°").
# A two-byte sequence's lead byte 0xC2–0xDE reads as a capital letter (Â … Þ; × and
# ß left out, they have no lower case) and is followed by a continuation byte's
# character. Casefolded text has no such capital, so a key is never repaired twice.
_MOJIBAKE = re.compile(rf"[\u00c2-\u00d6\u00d8-\u00de][{re.escape(_continuation_chars())}]")


def repair_mojibake(text: str) -> str:
    """Undo UTF-8 read as Latin-1 or Windows-1252 upstream, only when that is clear.

    Text is repaired only when it holds a typical mojibake sequence and ``ftfy``'s
    ``fix_encoding`` undoes it by re-encoding and decoding alone (no partial fixes),
    leaving no such sequence behind; anything else is returned as it is.
    """
    if not _MOJIBAKE.search(text):
        return text
    import ftfy  # only for the rare text that needs it

    fixed, steps = ftfy.fix_encoding_and_explain(text)
    if fixed == text or not steps:
        return _reread(text)
    if _MOJIBAKE.search(fixed) or any(step[0] not in ("encode", "decode") for step in steps):
        return text
    return fixed


def _reread(text: str) -> str:
    """The text re-read as UTF-8, when its Windows-1252 or Latin-1 bytes are valid UTF-8
    from end to end ("Ã…rhus", which ftfy leaves alone for the ellipsis in it); text
    typed in those encodings almost never is. Otherwise the text as it is."""
    for codec in ("cp1252", "latin-1"):
        try:
            fixed = text.encode(codec).decode("utf-8")
        except UnicodeError:
            continue
        if fixed != text and not _MOJIBAKE.search(fixed):
            return fixed
    return text


# Separators, split on later; and the Sindhi "and" (۽), a word inside names.
_KEPT_SYMBOLS = frozenset("|+<>\u06fd")


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

    @cached_property
    def key(self) -> str:  # read often, by each stage: joined once per part
        return " ".join(t.key for t in self.tokens)

    def __hash__(self) -> int:
        # Equal parts have equal folded texts; that string's hash is computed once.
        return hash(self.full_key)


@dataclass(frozen=True)
class Query:
    raw: str
    key: str  # cache key: canonical text (see normalize_key)
    folded: str  # the whole text folded for lookups, flags and emoji out
    parts: tuple[Part, ...]  # after noise removal
    flags: tuple[str, ...] = ()  # ISO codes from flag emoji
    postcodes: tuple[str, ...] = ()
    has_letters: bool = False
    # Taken out of the text before it is split into parts:
    coordinates: tuple[tuple[float, float], ...] = ()  # (latitude, longitude) pairs
    zones: tuple[str, ...] = ()  # IANA time-zone names ("Africa/Lagos"), see timezones.py
    offsets: tuple[str, ...] = ()  # UTC offsets and Etc/ zones ("UTC+2"): no place


_new = object.__new__


def _part(tokens: tuple[Token, ...], full_key: str, street: bool, lead_key: str) -> Part:
    """``Part(tokens, full_key, street, lead_key)``, made faster than by the frozen
    dataclass's ``__init__`` (each distinct part makes one); the same object."""
    part = _new(Part)
    part.__dict__.update(tokens=tokens, full_key=full_key, street=street, lead_key=lead_key)
    return part


def _query(
    raw: str,
    key: str,
    folded: str,
    parts: tuple[Part, ...],
    flags: tuple[str, ...],
    postcodes: tuple[str, ...],
    has_letters: bool,
    coordinates: tuple[tuple[float, float], ...],
    zones: tuple[str, ...],
    offsets: tuple[str, ...],
) -> Query:
    """``Query(...)`` with every field given, made faster than by the frozen dataclass's
    ``__init__`` (one per text, ten fields); the same object."""
    query = _new(Query)
    query.__dict__.update(
        raw=raw,
        key=key,
        folded=folded,
        parts=parts,
        flags=flags,
        postcodes=postcodes,
        has_letters=has_letters,
        coordinates=coordinates,
        zones=zones,
        offsets=offsets,
    )
    return query


class NoisePhrases:
    """Noise phrases by position: removed at the start, end or anywhere of a part."""

    def __init__(self, prefix: list[str], suffix: list[str], anywhere: list[str]) -> None:
        self._phrases = (prefix, suffix, anywhere)
        self._compiled: tuple[re.Pattern[str], re.Pattern[str], re.Pattern[str]] | None = None
        # A phrase matches only where its first (or, at the end, its last) word is a
        # word of the text: text without such a word is left as it is, unread.
        self._heads = _words_at(prefix, 0)
        self._tails = _words_at(suffix, -1)
        self._anywhere_heads = _words_at(anywhere, 0)
        # Distinct texts share most of their parts ("Paris" in "Paris, France" and
        # "Paris, TX"): a part is read once per process (``_read_part``, a pure function
        # of the chunk and these phrases), kept by its chunk.
        self.read_part = lru_cache(maxsize=20_000)(self._read_part)

    def _read_part(self, chunk: str) -> tuple[Part | None, tuple[str, ...]]:
        return _read_part(chunk, self)

    def patterns(self) -> tuple[re.Pattern[str], re.Pattern[str], re.Pattern[str]]:
        """The prefix, suffix and anywhere patterns, compiled when first needed (a few
        tens of milliseconds: a run whose answers are all stored never needs them)."""
        compiled = self._compiled
        if compiled is None:

            def alternation(phrases: list[str]) -> str:
                keys = sorted({fold(p) for p in phrases if fold(p)}, key=len, reverse=True)
                return "|".join(re.escape(k) for k in keys) or r"(?!x)x"

            prefix, suffix, anywhere = self._phrases
            compiled = self._compiled = (
                re.compile(rf"^(?:(?:{alternation(prefix)})\s+)+(?=\S)"),
                re.compile(rf"(?<=\S)(?:\s+(?:{alternation(suffix)}))+$"),
                re.compile(rf"(?:^|\s)(?:{alternation(anywhere)})(?=\s|$)"),
            )
        return compiled

    def _may_match(self, words: list[str]) -> bool:
        """Whether any phrase may match a text of these words (False only when none can)."""
        return bool(words) and (
            words[0] in self._heads
            or words[-1] in self._tails
            or not self._anywhere_heads.isdisjoint(words)
        )

    def strip_prefix(self, key: str) -> str:
        """Only the leading noise ("the Bay Area" → "Bay Area", whose last word is also noise)."""
        words = key.split(None, 1)
        if not words or words[0] not in self._heads:
            return key.strip()
        return self.patterns()[0].sub("", key).strip()

    def strip(self, key: str) -> str:
        """Remove noise around a part; a part that is nothing but noise stays as it is
        ("AU" is Australia's code, not the French article)."""
        if not self._may_match(key.split()):
            return key.strip()
        prefix, suffix, anywhere = self.patterns()
        previous = None
        while previous != key:
            previous = key
            key = anywhere.sub(" ", key).strip() or key
            key = prefix.sub("", key).strip()
            key = suffix.sub("", key).strip()
        return key


def _words_at(phrases: list[str], at: int) -> frozenset[str]:
    """The first (``at`` 0) or last (``at`` −1) words of the folded phrases."""
    return frozenset(fold(p).split()[at] for p in phrases if fold(p))


_EMPTY_NOISE = NoisePhrases([], [], [])


def _clean_text(raw: str) -> tuple[str, list[str]]:
    """Flags out (returned as ISO codes), emoji and stray symbols to spaces."""
    if raw.isascii():  # the common case: no flag, and a table says which symbols go
        return raw.translate(_ASCII_DROPPED), []
    raw = raw.replace("\u200b", "").replace("\u180e", "").translate(_WORD_SPACES)  # see fold
    text, flags = extract_flags(raw) if _FLAG_START.search(raw) else (raw, [])
    return text.translate(_DROPPED), flags


def _dropped(ch: str) -> bool:
    """Whether ``_clean_text`` turns the character into a space."""
    return _is_dropped_symbol(ch) or ch in '#@"!?*~'


class _DroppedSymbols(dict[int, str]):
    """``_clean_text``'s reading of each character by code point, for ``str.translate``:
    a space for what goes, else the character; filled as characters are met (at most
    ``_CHAR_FOLDS_MAX`` of them are kept)."""

    def __missing__(self, code: int) -> str:
        ch = chr(code)
        out = " " if _dropped(ch) else ch
        if len(self) < _CHAR_FOLDS_MAX:
            self[code] = out
        return out


_DROPPED = _DroppedSymbols()
# What ``_clean_text`` turns into spaces, for ASCII text in one pass.
_ASCII_DROPPED = {i: " " for i in range(128) if _dropped(chr(i))}
# Where a flag may start (``extract_flags``): a regional indicator or the black flag.
_FLAG_START = re.compile("[\U0001f1e6-\U0001f1ff\U0001f3f4]")
_ASCII_LETTER = re.compile("[A-Za-z]")  # str.isalpha on ASCII characters
_SHORT_CAPS = re.compile(r"(\b[A-Z]{2,3}\b)")  # a capture group: split keeps the words
# A window of a long cell ends before an ASCII character that is not part of a word (a
# space, a comma): NFKC, casefolding and the capitals rule never reach across one.
_WINDOW_END = re.compile(r"[\x00-\x2f\x3a-\x40\x5b-\x5e\x60\x7b-\x7f]")
_WINDOW = 4 * MAX_TEXT  # raw characters folded at a time (from memory: a few keys' worth)
_PASSES = 4  # folding a key again settles within one or two passes (measured on fuzzed text)


def _fold_window(raw: str) -> str:
    """NFKC, zero-width joiners out, casefolded except two- and three-letter capitals."""
    if raw.isascii():  # the common case: NFKC changes nothing, casefold is lower
        if raw.islower():
            return raw  # no capital letter: nothing to fold
        words = _SHORT_CAPS.split(raw)
        return "".join(w if i % 2 else w.lower() for i, w in enumerate(words))
    text = unicodedata.normalize("NFKC", repair_mojibake(raw))
    text = text.replace("\u200c", "").replace("\u200d", "")
    words = _SHORT_CAPS.split(text)
    # NFKC again after casefold, which may decompose.
    return "".join(
        w if i % 2 else unicodedata.normalize("NFKC", w.casefold()) for i, w in enumerate(words)
    )


def _key_pass(raw: str) -> str:
    """Fold ``raw`` window by window and collapse whitespace, up to ``MAX_TEXT`` characters.

    Reading stops once the key is full, so a pasted document costs no more than a line.
    """
    key, start = "", 0
    while start < len(raw) and len(key) < MAX_TEXT:
        found = _WINDOW_END.search(raw, start + _WINDOW)
        end = found.start() if found else len(raw)
        key = _WS.sub(" ", key + _fold_window(raw[start:end])).lstrip()
        start = end
    return key[:MAX_TEXT].rstrip()


def _settled_key(raw: str) -> str:
    key = _key_pass(raw)
    if raw.isascii() and len(raw) <= MAX_TEXT:
        return key  # ASCII folding keeps every word's bounds: one pass is final
    # Folding can move a word boundary (a combining mark composes, U+0345 becomes a
    # letter) and the cut can split a word: fold again until nothing changes.
    for _ in range(_PASSES):
        again = _key_pass(key)
        if again == key:
            if len(_SETTLED) >= _SETTLED_MAX:
                _SETTLED.clear()
            _SETTLED.add(key)
            break
        key = again
    return key


_cached_key = lru_cache(maxsize=500_000)(_settled_key)
# Keys seen to be their own key (a pass over them changed nothing). The resolver reads
# a text by its key, which is normalised again: such a key is not folded twice more.
_SETTLED: set[str] = set()
_SETTLED_MAX = 100_000


def normalize_key(raw: str) -> str:
    """The canonical form of a raw value; everything the resolver reads comes from it.

    Mojibake repaired (``repair_mojibake``), Unicode NFKC, zero-width joiners removed,
    casefolded, whitespace collapsed, and
    at most ``MAX_TEXT`` (500) characters: the rest of a longer cell is not read.
    Two things survive that matter for reading: accents (Vietnamese "Áo" is
    Austria, "ao" may be Angola's code) and capitals in two- or three-letter
    words ("CAN" is a country code, "can" a verb). Case and spacing variants
    share a key; the resolver's answer is a function of the key alone. The key
    is its own key: ``normalize_key(normalize_key(s)) == normalize_key(s)``.
    """
    if len(raw) > _WINDOW:  # a very long cell: computed from its head, not memoised
        return _settled_key(raw)
    if raw in _SETTLED:
        return raw
    return _cached_key(raw)


def _is_street(words: list[str]) -> bool:
    """A street line of an address: a street word anywhere, or a suffix-only one after a name."""
    return not STREET_WORDS.isdisjoint(words) or not STREET_SUFFIX_ONLY.isdisjoint(words[1:])


def _take_postcodes(text: str, postcodes: list[str]) -> str:
    """Postcodes whose shape names the country ("EH8 9YL" → "GB:eh8") into ``postcodes``;
    returns the text with them blanked."""
    if not _DIGIT.search(text):
        return text  # every format holds a digit
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
    if chunk.isascii() and chunk.replace(" ", "").isalnum():
        # Plain ASCII words (the common case): each is a token, folded by lowering it.
        for w in chunk.split():
            orig_by_key.setdefault(w.lower(), w)
    else:
        for w in _TOKEN.findall(chunk):
            orig_by_key.setdefault(fold(w), w.strip("."))
    tokens = []
    for word in text.split():
        word = word.strip("'-+<>|")
        if not word:
            continue
        if word[0].isalpha():  # a letter is neither a digit nor a number's start
            tokens.append(Token(word, orig_by_key.get(word, word)))
        elif _NUMERIC_POSTCODE.match(word):
            postcodes.append(word)
        elif not (word.isdigit() or _NUMBER_LIKE.fullmatch(word)):
            tokens.append(Token(word, orig_by_key.get(word, word)))
    return tokens


def _read_part(chunk: str, noise: NoisePhrases) -> tuple[Part | None, tuple[str, ...]]:
    """One part between hard separators, noise removed (None when no word is left),
    and the postcodes found in it, in order."""
    postcodes: list[str] = []
    folded = fold(chunk)
    stripped = noise.strip(folded)
    if not stripped:
        return None, ()
    tokens = _tokens(_take_postcodes(stripped, postcodes), chunk, postcodes)
    if not tokens:
        return None, tuple(postcodes)
    part = _part(tuple(tokens), folded, _is_street(folded.split()), noise.strip_prefix(folded))
    return part, tuple(postcodes)


def normalize(raw: object, noise: NoisePhrases | None = None) -> Query:
    """Normalise one raw value. Never raises; non-strings become empty queries."""
    if not isinstance(raw, str):
        raw = "" if raw is None else str(raw)
    key = normalize_key(raw)
    coordinates, rest = find_coordinates(key)
    zones, rest = find_zones(rest)
    offsets, rest = find_offsets(rest)
    text, flags = _clean_text(rest)
    noise = noise or _EMPTY_NOISE
    parts: list[Part] = []
    postcodes: list[str] = []
    for chunk in _HARD_SEP.split(text) if _MAY_SEPARATE.search(text) else (text,):
        if chunk and chunk.strip():
            part, found = noise.read_part(chunk)
            postcodes.extend(found)
            if part is not None:
                parts.append(part)
    if key.isascii():
        has_letters = _ASCII_LETTER.search(key) is not None or bool(flags)
    else:
        has_letters = any(c.isalpha() for c in key) or bool(flags)
    return _query(
        raw,
        key,
        fold(text),
        tuple(parts),
        tuple(flags),
        tuple(postcodes),
        has_letters,
        tuple(coordinates),
        tuple(z.name for z in zones if not z.offset) if zones else (),
        tuple(offsets) + tuple(z.name for z in zones if z.offset) if zones else tuple(offsets),
    )
