"""The answer pipeline as columns: a whole file's distinct values at once.

``answer_table`` runs the steps of ``answers.resolve_keys`` — stored answers,
the cascade for the keys the cache lacks (each chunk stored as it finishes),
people's decisions, the file prior, the accept threshold — over polars
columns, and gives the same answers value for value. Python objects are made
only where a step needs one: fresh answers from the cascade, people's
decisions, and the answers the file prior may re-rank. A rerun over a file
whose strings are all known costs a few bulk reads and polars joins:

- each raw text's key and stored answer come from the cache's answer packs
  (blocks of columns that earlier runs of the same resolver version stored);
  a text no pack holds gets its stored key (``with_keys``) and its key's
  stored answer in bulk, and only texts never seen are normalised;
- statuses are set by ``resolution.status_at`` once per distinct combination
  of its inputs, not once per row;
- the file prior is tallied as columns; what it does to the answers it weighs
  depends on them, the prior, the calibration and the threshold alone, so it
  is stored under the prior's fingerprint and a rerun of the file reads it back.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, cast, overload

import polars as pl

from ..progress import Progress, no_progress, note, start
from ..resolve.normalize import MAX_TEXT
from ..resolve.prior import eligible, file_prior, reconsider
from ..resolve.resolution import Reason, Resolution, Status, status_at
from ..resolve.resolver import Resolver
from ..resolve.tuning import PRIOR_MIN_CONFIDENCE
from .engines import Chunk, Engine, LocalEngine
from .formats import per_distinct
from .schema import GEO_FIELDS, GeoRow

if TYPE_CHECKING:
    from .cache import Cache, StoredRow

__all__ = ["KEPT_TEXT", "AnswerTable", "answer_table", "with_keys"]

# Raw texts up to this many characters are kept by text (their key, their answer); a
# longer cell is normalised again on each run rather than stored whole.
KEPT_TEXT = 2000
_KEY_BATCH = 50_000  # new texts normalised (and their keys stored) per batch

# Reasons whose answers the file prior may re-rank: kept as whole answers (see ``prior.eligible``).
_PRIOR_REASONS = frozenset({Reason.AMBIGUOUS, Reason.CITY_BY_SIZE})
_ROW_SCHEMA: dict[str, Any] = {
    "key": pl.String,
    "status": pl.String,
    "reason": pl.String,
    "country": pl.String,
    "subdivision": pl.String,
    "city": pl.String,
    "lat": pl.Float64,
    "lon": pl.Float64,
    "confidence": pl.Float64,
    "reason_text": pl.String,
}
# Statuses and reasons by their text: a look-up, cheaper than calling the enum per row.
_STATUSES = {s.value: s for s in Status}
_REASONS = {r.value: r for r in Reason}
# What the file prior did to each answer it weighed: ``changed``, and the new answer if so.
_MEMO_SCHEMA: dict[str, Any] = {**_ROW_SCHEMA, "changed": pl.Boolean}


@dataclass
class AnswerTable:
    """Final answers of a file's distinct values, as columns.

    ``values`` has one row per distinct raw value (``value``, missing as null),
    its row count (``rows``) and its ``key``; ``answers`` one row per key with
    the geo columns (``GEO_FIELDS``: what ``GeoRow.of`` gives for the answer).
    """

    values: pl.DataFrame
    answers: pl.DataFrame
    from_cache: int = 0
    resolved: int = 0
    decided: int = 0
    _by_value: pl.DataFrame | None = field(default=None, init=False, repr=False, compare=False)
    _distinct: int | None = field(default=None, init=False, repr=False, compare=False)

    @property
    def distinct(self) -> int:
        """How many distinct keys (distinct strings once normalised)."""
        if self._distinct is None:
            self._distinct = self.values.get_column("key").n_unique()
        return self._distinct

    def by_value(self) -> pl.DataFrame:
        """``value`` and the geo columns, one row per distinct value, in ``values``' order."""
        if self._by_value is None:
            self._by_value = (
                self.values.select("value", "key")
                .join(self.answers, on="key", how="left", maintain_order="left")
                .drop("key")
            )
        return self._by_value

    def status_rows(self) -> dict[str, int]:
        """Rows per status (every status named, zero where none)."""
        got = (
            self.by_value()
            .select("status", self.values.get_column("rows"))
            .group_by("status")
            .agg(pl.col("rows").sum())
        )
        found = dict(zip(got["status"].to_list(), got["rows"].to_list(), strict=True))
        return {s.value: int(found.get(s.value) or 0) for s in Status}

    def mapping(self) -> dict[str | None, GeoRow]:
        """Value → its ``GeoRow`` (for writers that go row by row)."""
        table = self.by_value()
        return dict(
            zip(
                table["value"].to_list(),
                (GeoRow(*r) for r in table.select(GEO_FIELDS).iter_rows()),
                strict=True,
            )
        )


def answer_table(
    values: pl.DataFrame,
    *,
    resolver: Resolver,
    cache: Cache | None = None,
    accept: float | None = None,
    engine: Engine | None = None,
    progress: Progress = no_progress,
) -> AnswerTable:
    """Final answers for a file's distinct values (``value``, missing as null, and ``rows``),
    as ``resolve_keys`` gives them, without a Python object per value.

    The steps are ``resolve_keys``'s: stored answers, the cascade for the keys the
    cache lacks (each chunk stored at once), people's decisions, the file prior,
    the accept threshold.
    """
    accept = resolver.accept if accept is None else accept
    version = resolver.version
    packed = _packed(values, cache, version)
    keyed = packed.select("value", "rows", "key")
    rest = keyed.filter(pl.col("key").is_null()).drop("key")
    rest_keyed = with_keys(rest, resolver, cache)
    keyed = pl.concat([keyed.filter(pl.col("key").is_not_null()), rest_keyed])
    counts = keyed.group_by("key").agg(pl.col("rows").sum())
    note(
        progress,
        f"{int(counts.get_column('rows').sum()):,} rows, {counts.height:,} distinct strings",
    )
    keys = counts.get_column("key")
    known = packed.filter(pl.col("key").is_not_null()).drop("value", "rows")
    # Every key of a text a pack holds has its answer there: only the others are looked for.
    others = _not_among(rest_keyed.get_column("key").unique(), known.get_column("key"))
    if counts.height - others.len() < known.height:  # texts that share a key
        known = known.filter(known.get_column("key").is_first_distinct())
    found = _stored(others, cache, version)
    parts = [known, found]
    fresh: dict[str, Resolution] = {}
    missing = _not_among(others, found.get_column("key"))
    misses = _Keys(missing.sort())
    if misses:
        advance = start(progress, "resolving", len(misses))

        def take(chunk: Chunk) -> None:
            if cache is not None:  # one transaction per chunk: a killed run keeps it
                cache.put_rows(chunk.rows, version)
                parts.append(_rows_of_stored(chunk.rows))
            else:  # the file prior reads answers it may re-rank back from the cache, if any
                parts.append(_rows_of(chunk))
                fresh.update((k, r) for k, r in chunk.items() if r.reason in _PRIOR_REASONS)
            advance(len(chunk))

        (engine or LocalEngine()).resolve(resolver, misses, take)
    stored = pl.concat(parts, how="vertical")
    if cache is not None:
        texts = (
            keyed.join(rest.select("value"), on="value", how="semi").filter(
                pl.col("value").str.len_chars() <= KEPT_TEXT
            )
            if rest.height
            else rest
        )
        if texts.height:
            cache.put_pack(_pack(texts, stored), version)
    decisions = cache.overrides_among(keys) if cache is not None else {}
    decided = {key: Resolution.from_override(d) for key, d in decisions.items()}
    rows = _replace(_with_status(stored, accept), decided, accept)
    reranked = _reranked(rows, counts, fresh, decided, resolver, cache, accept)
    table = AnswerTable(
        keyed,
        _geo_columns(_replace(rows, reranked, accept)),
        from_cache=known.height + found.height,
        resolved=len(misses),
        decided=len(decisions),
    )
    table._distinct = counts.height
    return table


def _not_among(keys: pl.Series, among: pl.Series) -> pl.Series:
    """``keys`` (distinct, usually few) that are not among ``among`` (maybe many)."""
    if not keys.len() or not among.len():
        return keys
    shared = among.filter(among.is_in(keys.implode()))
    return keys.filter(~keys.is_in(shared.implode()))


_PACK_COLUMNS = (
    "text",
    "key",
    "status",
    "reason",
    "country",
    "subdivision",
    "city",
    "lat",
    "lon",
    "confidence",
)


class _Keys(Sequence[str]):
    """Keys held as a polars column, in order; a slice is made a list when an engine takes
    it, so a million keys are not a million Python strings at once."""

    def __init__(self, keys: pl.Series) -> None:
        self._keys = keys

    def __len__(self) -> int:
        return self._keys.len()

    @overload
    def __getitem__(self, index: int) -> str: ...

    @overload
    def __getitem__(self, index: slice) -> list[str]: ...

    def __getitem__(self, index: int | slice) -> str | list[str]:
        if isinstance(index, slice):
            return self._keys[index].to_list()
        return str(self._keys[index])


def _packed(values: pl.DataFrame, cache: Cache | None, version: str) -> pl.DataFrame:
    """``values`` (``value``, ``rows``) with the key and stored answer of each raw text the
    cache's answer packs hold (``key`` and the answer columns; missing for the others)."""
    packs = cache.answer_packs(version, values.height) if cache else None
    if packs is None:
        packs = pl.DataFrame(schema={c: _ROW_SCHEMA.get(c, pl.String) for c in _PACK_COLUMNS})
    found = values.join(packs.rename({"text": "value"}), on="value", how="left")
    if cache is not None:
        cache.checked_answers(found.filter(pl.col("key").is_not_null()))
    return found.with_columns(pl.col("reason").alias("reason_text"))  # stored: no remote source


def _stored(keys: pl.Series, cache: Cache | None, version: str) -> pl.DataFrame:
    """The cache's answer rows of ``keys`` (none without a cache)."""
    if cache is None or not keys.len():
        return pl.DataFrame(schema=_ROW_SCHEMA)
    return cache.answer_rows(keys, version).with_columns(pl.col("reason").alias("reason_text"))


def _pack(texts: pl.DataFrame, stored: pl.DataFrame) -> pl.DataFrame:
    """Raw texts with their keys' stored answers (before decisions and the file prior)."""
    return (
        texts.select(pl.col("value").alias("text"), "key")
        .join(stored.drop("reason_text"), on="key", how="inner")
        .select(_PACK_COLUMNS)
    )


def with_keys(values: pl.DataFrame, resolver: Resolver, cache: Cache | None) -> pl.DataFrame:
    """``values`` (``value``, ``rows``) with the ``key`` of each: keys stored by an earlier
    run of the same resolver version read back, the others normalised (and stored, so the
    next run reads them)."""
    version = resolver.version
    texts = values.get_column("value")
    known = (
        cache.text_keys(texts, version)
        if cache is not None
        else pl.DataFrame(schema={"text": pl.String, "key": pl.String})
    )
    new = texts.drop_nulls().filter(~texts.drop_nulls().is_in(known.get_column("text").implode()))
    new = new.sort()  # stored in the order of the table's index: about half the writing time
    parts = [known]
    for start_at in range(0, new.len(), _KEY_BATCH):  # a batch at a time: few Python strings
        texts_in = new.slice(start_at, _KEY_BATCH)
        batch = texts_in.to_list()
        keys = [
            resolver.key(t) if k is None else k
            for t, k in zip(batch, plain_keys(texts_in).to_list(), strict=True)
        ]
        if cache is not None:
            kept = [i for i, t in enumerate(batch) if len(t) <= KEPT_TEXT]
            cache.put_text_keys([batch[i] for i in kept], [keys[i] for i in kept], version)
        parts.append(pl.DataFrame({"text": batch, "key": keys}, schema=known.schema))
    known = pl.concat(parts)
    keyed = values.join(
        known.rename({"text": "value"}), on="value", how="left", maintain_order="left"
    )
    return keyed.with_columns(
        pl.when(pl.col("value").is_null())
        .then(pl.lit(resolver.key(None)))
        .otherwise(pl.col("key"))
        .alias("key")
    )


# ASCII whitespace as Python's ``str.isspace`` (and ``re``'s ``\s``) knows it: with
# \x1c to \x1f, which a regex engine's ``\s`` may leave out.
_ASCII_SPACES = "[" + "".join(f"\\x{c:02x}" for c in range(128) if chr(c).isspace()) + "]+"


def plain_keys(texts: pl.Series) -> pl.Series:
    """``normalize_key`` of each text where that is plain, computed in polars; missing
    for the others (and for a missing text), which are normalised one by one.

    Plain: ASCII, at most ``MAX_TEXT`` characters, no word of two or three capitals
    (kept as typed: "CAN" is a country code). The key of such a text is the text
    lowercased, each run of whitespace one space, stripped: what ``normalize_key``'s
    ASCII path gives (tests/test_warm_path.py checks it against ``normalize_key``).
    """
    plain = (
        (texts.str.len_bytes() == texts.str.len_chars())  # one byte a character: ASCII
        & (texts.str.len_bytes() <= MAX_TEXT)
        & ~texts.str.contains(r"\b[A-Z]{2,3}\b")
    )
    key = texts.str.replace_all(_ASCII_SPACES, " ").str.to_lowercase().str.strip_chars(" ")
    return pl.select(pl.when(plain).then(key).alias(texts.name)).to_series()


def _rows_of(answers: Mapping[str, Resolution], accept: float | None = None) -> pl.DataFrame:
    """Answers as rows of the table (the fields the geo columns and the status need); with
    ``accept``, their status as ``settle`` sets it at that threshold."""
    return pl.DataFrame(
        {
            "key": list(answers),
            "status": [
                (r.status if accept is None else status_at(r, accept)).value
                for r in answers.values()
            ],
            "reason": [r.reason.value for r in answers.values()],
            "country": [r.country for r in answers.values()],
            "subdivision": [r.subdivision for r in answers.values()],
            "city": [r.city for r in answers.values()],
            "lat": [r.lat for r in answers.values()],
            "lon": [r.lon for r in answers.values()],
            "confidence": [r.confidence for r in answers.values()],
            "reason_text": [r.reason_text for r in answers.values()],
        },
        schema=_ROW_SCHEMA,
    )


def _rows_of_stored(stored: Sequence[StoredRow]) -> pl.DataFrame:
    """``_rows_of`` for answers as the cache stores them (``cache.stored_row``); fresh
    answers have no remote source, so their reason is written as it is."""
    key, status, reason, country, sub, city, lat, lon, _gid, conf, _score, _detail = (
        (list(c) for c in zip(*stored, strict=True)) if stored else ([] for _ in range(12))
    )
    columns = [key, status, reason, country, sub, city, lat, lon, conf, reason]
    return pl.DataFrame(dict(zip(_ROW_SCHEMA, columns, strict=True)), schema=_ROW_SCHEMA)


def _replace(
    rows: pl.DataFrame, changed: Mapping[str, Resolution] | pl.DataFrame, accept: float
) -> pl.DataFrame:
    """``rows`` with the answers of ``changed`` (settled at ``accept``; or rows of such
    answers) in place of theirs."""
    if not len(changed):
        return rows
    new = changed if isinstance(changed, pl.DataFrame) else _rows_of(changed, accept)
    kept = rows.filter(~pl.col("key").is_in(new.get_column("key").implode()))
    return pl.concat([kept, new], how="vertical")


class _Probe:
    """The fields of an answer that ``status_at`` reads (cheaper to make than a Resolution)."""

    __slots__ = ("confidence", "country", "reason", "status")

    def __init__(
        self, status: Status, reason: Reason, country: str, confidence: float | None
    ) -> None:
        self.status, self.reason, self.country = status, reason, country
        self.confidence = confidence


def _with_status(rows: pl.DataFrame, accept: float) -> pl.DataFrame:
    """``rows`` with ``status`` as ``settle`` sets it at ``accept``.

    ``status_at`` is asked once per distinct (status, reason, has a country, confidence
    reaches ``accept``), the inputs of its rule, not once per row: with the country and
    confidence of one row of each, which answer as every row of it would. (Reaching is
    compared as Python compares: NaN reaches nothing; a missing confidence is a group
    of its own.)
    """
    conf = pl.col("confidence")
    rows = rows.with_columns(
        (pl.col("country").fill_null("") != "").alias("_placed"),
        ((conf >= accept) & ~conf.is_nan()).alias("_reaches"),
    )
    inputs = ["status", "reason", "_placed", "_reaches"]
    combos = rows.group_by(inputs).agg(pl.col("country").first(), conf.first())
    settled = [
        status_at(
            cast(Resolution, _Probe(_STATUSES[st], _REASONS[r], country or "", confidence)),
            accept,
        ).value
        for st, r, _, _, country, confidence in combos.iter_rows()
    ]
    combos = combos.select(inputs).with_columns(pl.Series("_settled", settled, dtype=pl.String))
    return (
        rows.join(combos, on=inputs, how="left", nulls_equal=True)
        .with_columns(pl.col("_settled").alias("status"))
        .drop("_placed", "_reaches", "_settled")
    )


def _reranked(
    rows: pl.DataFrame,
    counts: pl.DataFrame,
    fresh: Mapping[str, Resolution],
    decided: Mapping[str, Resolution],
    resolver: Resolver,
    cache: Cache | None,
    accept: float,
) -> pl.DataFrame:
    """Rows of the answers the file prior changes, settled (``prior.rerank``, with the prior
    tallied as columns from ``rows``, whose statuses are settled).

    Only the answers it may re-rank are read back whole (with their evidence), and only
    when the file has a prior.
    """
    settled = rows.join(counts, on="key", how="inner")
    tally = (
        settled.filter(
            (pl.col("status") == Status.MATCHED.value)
            & (pl.col("confidence") >= PRIOR_MIN_CONFIDENCE)
            & (pl.col("reason") != Reason.FILE_PRIOR.value)
        )
        .group_by("country")
        .agg(pl.col("rows").sum())
    )
    # One confidently matched answer per country carrying that country's rows: the
    # prior of ``file_prior`` (its smoothing and its minimum of rows) over the tally.
    by_country = {
        country: Resolution(Status.MATCHED, Reason.COUNTRY_NAME, country, confidence=1.0)
        for country in tally.get_column("country").to_list()
    }
    prior = file_prior(
        by_country, dict(zip(tally["country"].to_list(), tally["rows"].to_list(), strict=True))
    )
    if not prior:
        return pl.DataFrame(schema=_ROW_SCHEMA)
    candidates = settled.filter(
        pl.col("reason").is_in([r.value for r in _PRIOR_REASONS])
        & pl.col("status").is_in([Status.MATCHED.value, Status.REVIEW.value])
    ).get_column("key")
    wanted = candidates.filter(
        ~candidates.is_in(pl.Series(list(decided), dtype=pl.String).implode())
    )
    # What the prior does to an answer depends on the answer, the prior, the calibration
    # and the threshold alone: a rerun of the same file reads it back instead.
    fingerprint = hashlib.sha256(
        json.dumps([resolver.version, accept, sorted(prior.items())]).encode()
    ).hexdigest()
    memo = cache.prior_results(fingerprint) if cache is not None else None
    if memo is None:
        memo = pl.DataFrame(schema=_MEMO_SCHEMA)
    todo = wanted.filter(~wanted.is_in(memo.get_column("key").implode())).to_list()
    whole = dict(fresh)
    if cache is not None and todo:
        whole.update(cache.get_many([k for k in todo if k not in fresh], resolver.version))
    changed: dict[str, Resolution] = {}
    for key in todo:
        res = whole.get(key)
        if res is not None and eligible(res, accept):
            new = reconsider(res, prior, resolver.calibration)
            if new is not res:
                changed[key] = new
    done = pl.concat(
        [
            _rows_of(changed, accept).with_columns(pl.lit(True).alias("changed")),
            pl.DataFrame(
                {"key": [k for k in todo if k not in changed]}, schema={"key": pl.String}
            ).with_columns(pl.lit(False).alias("changed")),
        ],
        how="diagonal",
    ).select(list(_MEMO_SCHEMA))
    if cache is not None and todo:
        cache.put_prior_results(fingerprint, resolver.version, pl.concat([memo, done]))
    reused = memo.filter(pl.col("key").is_in(wanted.implode()))
    return pl.concat([reused, done]).filter(pl.col("changed")).select(list(_ROW_SCHEMA))


def _geo_columns(settled: pl.DataFrame) -> pl.DataFrame:
    """``key`` and the geo columns (``GEO_FIELDS``), as ``GeoRow.of`` gives them."""
    return settled.select(
        "key",
        "country",
        "subdivision",
        "city",
        "lat",
        "lon",
        per_distinct(settled.get_column("confidence"), lambda c: round(c, 3), pl.Float64),
        pl.col("reason_text").alias("reason"),
        "status",
    )
