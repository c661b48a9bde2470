"""The cascade resolver: text → query → mentions → one decision → calibrated answer.

1. ``normalize`` turns the text into a query (parts, words, flags, postcodes).
2. The not-a-place filter may end the cascade (empty, placeholder, junk, fictional).
3. The stages (flags, postcodes, country, subdivision, city) find mentions;
   ``mentions.gather`` merges them, tries spelling-tolerant matching on words
   they left unexplained and prunes readings (``mentions.py``).
4. ``decide.decide`` weighs the mentions into one answer (``decide.py``).
5. The evidence score is mapped to a calibrated confidence (``calibration.py``)
   and ``resolution.settle`` sets the status from the accept threshold.

Across a file, ``prior.rerank`` leans ambiguous names towards the file's
countries (``prior.py``). Tuning constants live in ``tuning.py``.
"""

from __future__ import annotations

import json
import zlib

from .calibration import Calibration, load_calibration
from .decide import decide
from .evidence import CoordinateStage, TimeZoneStage
from .index import PlaceIndex, load_index
from .mentions import gather, load_words
from .normalize import NoisePhrases, Query, normalize, normalize_key
from .resolution import Reason, Resolution, Status, settle
from .stages import (
    AbbreviationStage,
    CityStage,
    CountryStage,
    FlagStage,
    FuzzyMatcher,
    Mention,
    NotAPlaceFilter,
    PostcodeStage,
    Segmenter,
    Stage,
    SubdivisionStage,
)
from .tuning import DEFAULT_ACCEPT

__all__ = ["DEFAULT_ACCEPT", "RESOLVER_VERSION", "Resolver"]

# Bump when answers change, so caches do not serve old answers.
RESOLVER_VERSION = "1.5"
NOT_A_PLACE_REASON = {
    "empty": Reason.EMPTY,
    "placeholder": Reason.PLACEHOLDER,
    "junk": Reason.JUNK,
    "fictional": Reason.FICTIONAL,
}


class Resolver:
    """Resolve free-text locations. Thread-safe after construction.

    >>> r = Resolver()                      # doctest: +SKIP
    >>> r.resolve("austin tx").country      # doctest: +SKIP
    'US'
    """

    def __init__(
        self,
        index: PlaceIndex | None = None,
        *,
        accept: float = DEFAULT_ACCEPT,
        calibration: Calibration | None = None,
        progress=None,
    ) -> None:
        if not 0.0 <= accept <= 1.0:
            from ..errors import InputError

            raise InputError(
                f"`accept` must be between 0 and 1, got {accept}",
                hint="use a probability such as 0.8",
            )
        self.index = index or load_index(progress=progress)
        self.accept = accept
        self.calibration = calibration or load_calibration()
        prefix: list[str] = []
        suffix: list[str] = []
        anywhere: list[str] = []
        for phrase, position in self.index.noise:
            {"prefix": prefix, "suffix": suffix}.get(position, anywhere).append(phrase)
        self.noise = NoisePhrases(prefix, suffix, anywhere)
        self.segmenter = Segmenter(self.index)
        self.not_a_place = NotAPlaceFilter(self.index)
        # The cascade, in order; their mentions are merged by span in this order.
        self.stages: list[Stage] = [
            FlagStage(self.index),
            CoordinateStage(self.index),
            TimeZoneStage(self.index),
            PostcodeStage(self.index),
            CountryStage(self.index),
            AbbreviationStage(self.index),
            SubdivisionStage(self.index),
            CityStage(self.index),
        ]
        self.fuzzy = FuzzyMatcher(self.index)

    @property
    def version(self) -> str:
        """Identifies everything an answer depends on except the accept threshold."""
        cal = self.calibration
        curves = json.dumps([cal.method, cal.a, cal.b, cal.by_reason], sort_keys=True)
        # The index's content hash, not its build time: hosts that built the same
        # index apart agree (``build.layout.content_hash``).
        content = self.index.meta.get("content_hash", "")[:12]
        return (
            f"{RESOLVER_VERSION}+index{self.index.meta.get('index_version')}"
            f"@{content}+cal{zlib.crc32(curves.encode()):08x}"
        )

    def warm(self) -> None:
        """Load the in-memory tables (names, places, words) and compile the noise patterns
        now rather than on first use: before forking workers, so that they share them
        instead of each making its own."""
        self.index.load_tables()
        self.noise.patterns()
        load_words()

    def normalize(self, raw: object) -> Query:
        return normalize(raw, self.noise)

    def key(self, raw: object) -> str:
        """The cache key of a raw value (see ``normalize_key``); answers depend on it alone."""
        if not isinstance(raw, str):
            raw = "" if raw is None else str(raw)
        return normalize_key(raw)

    def resolve(self, raw: object) -> Resolution:
        """Resolve one string. Never raises on any text.

        Only the text's key is read (``normalize_key``), which holds at most
        ``MAX_TEXT`` characters: the cut is the same for every entry point.
        """
        query = self.normalize(raw)
        kind = self.not_a_place.classify(query)
        if kind:
            return Resolution(
                Status.NOT_A_PLACE,
                NOT_A_PLACE_REASON.get(kind, Reason.JUNK),
                confidence=1.0,
                score=1.0,
            )
        res = decide(query, self.mentions(query), self.not_a_place.fictional_names(query))
        if res.status is Status.NOT_A_PLACE:
            res.confidence = 1.0
        else:
            res.confidence = (
                round(self.calibration.apply(res.score, res.reason), 4) if res.country else 0.0
            )
        return settle(res, self.accept)

    def mentions(self, query: Query) -> list[Mention]:
        """Run the stages in order over the query's spans; merge, respell and prune."""
        spans = self.segmenter.spans(query)
        found = [m for stage in self.stages for m in stage.resolve(query, spans)]
        return gather(query, spans, found, self.fuzzy)
