"""The answer pipeline as columns (``batch/columnar.py``): the same answers as
``resolve_keys`` value for value, cold and warm, with people's decisions and the
file prior; warm runs read keys and answers back instead of normalising again;
byte-identical outputs whether a run is cold or warm."""

from __future__ import annotations

import csv
import io
import itertools
import random
import re
import sqlite3
from pathlib import Path

import polars as pl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from geonorm.batch import columnar
from geonorm.batch.answers import resolve_keys
from geonorm.batch.cache import CACHE_SCHEMA, Cache
from geonorm.batch.clean import clean_file
from geonorm.batch.columnar import answer_table
from geonorm.batch.formats import _text_column, as_text_row
from geonorm.batch.schema import GeoRow
from geonorm.errors import CacheError
from geonorm.resolve.normalize import normalize_key
from geonorm.resolve.resolution import Reason, Resolution, Status, status_at
from geonorm.resolve.resolver import Resolver

# Invented member locations: a file of Venezuelans (so its prior leans "Valencia" and
# "Barcelona" towards VE), spellings that share a key, an empty cell and a missing one.
_TEXTS = (
    ["Caracas"] * 30
    + ["Maracaibo, Venezuela"] * 15
    + ["Barquisimeto"] * 10
    + ["caracas  ", "CARACAS", "Valencia", "Barcelona", "Valencia", "Springfield"]
    + ["Paris", "n/a", "", None, "Lagos", "Oslo, Norway", "asdf 77", "🇧🇷", "São Paulo"]
)


def _values(texts: list[str | None]) -> pl.DataFrame:
    counts = pl.DataFrame({"value": texts}, schema={"value": pl.String})
    return counts.group_by("value", maintain_order=True).agg(pl.len().cast(pl.Int64).alias("rows"))


def _by_objects(texts: list[str | None], resolver: Resolver, cache: Cache | None, accept: float):
    """Value → GeoRow through ``resolve_keys``: the object path, the reference."""
    counts: dict[str, int] = {}
    for t in texts:
        counts[resolver.key(t)] = counts.get(resolver.key(t), 0) + 1
    answers = resolve_keys(counts, resolver=resolver, cache=cache, accept=accept)
    return {t: GeoRow.of(answers.results[resolver.key(t)]) for t in texts}


def _by_columns(texts, resolver, cache, accept):
    table = answer_table(_values(texts), resolver=resolver, cache=cache, accept=accept)
    return table.mapping(), table


@pytest.mark.parametrize("accept", [0.7, 0.95])
def test_columns_equal_objects_cold_warm_and_without_a_cache(resolver, tmp_path, accept):
    reference = _by_objects(_TEXTS, resolver, None, accept)
    assert any(g.reason == Reason.FILE_PRIOR.value for g in reference.values())  # prior at work
    with Cache(tmp_path / "c.sqlite") as cache:
        cold, first = _by_columns(_TEXTS, resolver, cache, accept)
        warm, second = _by_columns(_TEXTS, resolver, cache, accept)
    bare, _ = _by_columns(_TEXTS, resolver, None, accept)
    assert cold == warm == bare == reference
    assert first.resolved == first.distinct and first.from_cache == 0
    assert second.resolved == 0 and second.from_cache == second.distinct
    assert sum(second.status_rows().values()) == len(_TEXTS)


def test_a_warm_run_normalises_nothing(resolver, tmp_path, monkeypatch):
    with Cache(tmp_path / "c.sqlite") as cache:
        answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
        calls: list[object] = []
        real = Resolver.key

        def counted(self: Resolver, raw: object) -> str:
            calls.append(raw)
            return real(self, raw)

        monkeypatch.setattr(Resolver, "key", counted)
        monkeypatch.setattr(Resolver, "resolve", lambda *a: pytest.fail("resolved again"))
        answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
    assert calls == [None]  # the missing value's key only: every text was read back


def test_texts_new_to_the_cache_are_normalised_once(resolver, tmp_path):
    with Cache(tmp_path / "c.sqlite") as cache:
        answer_table(_values(_TEXTS[:40]), resolver=resolver, cache=cache)
        table = answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
        again, _ = _by_columns(_TEXTS, resolver, cache, resolver.accept)
    assert table.mapping() == again == _by_objects(_TEXTS, resolver, None, resolver.accept)


def test_texts_no_pack_holds_are_read_by_key_or_resolved(resolver, tmp_path):
    with Cache(tmp_path / "c.sqlite") as cache:
        answer_table(_values(_TEXTS[:40]), resolver=resolver, cache=cache)  # two texts packed
        oslo = resolver.key("Oslo, Norway")
        resolve_keys({oslo: 1}, resolver=resolver, cache=cache)  # stored by key, no pack
        table = answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
        again = answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
    assert table.from_cache == 3 and table.resolved == table.distinct - 3
    assert again.from_cache == again.distinct and again.resolved == 0
    reference = _by_objects(_TEXTS, resolver, None, resolver.accept)
    assert table.mapping() == again.mapping() == reference


def test_a_packed_answer_with_a_status_not_ours_is_named_with_a_hint(resolver, tmp_path):
    with Cache(tmp_path / "c.sqlite") as cache:
        answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
        pack = cache.answer_packs(resolver.version, len(_TEXTS))
        assert pack is not None
        cache.conn.execute("DELETE FROM answer_pack")
        cache.put_pack(pack.with_columns(status=pl.lit("no-such-status")), resolver.version)
        with pytest.raises(CacheError) as err:
            answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
    assert "damaged" in err.value.message and "backup" in err.value.hint


def test_a_cache_of_layout_4_keeps_its_blocks_of_arrow_ipc_and_reads_them(resolver, tmp_path):
    path = tmp_path / "c.sqlite"
    with Cache(path) as cache:
        first = answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
    with sqlite3.connect(path) as db:  # as layout 4 left it: blocks of Arrow IPC
        for table in ("answer_pack", "prior_pack"):
            blobs = db.execute(f"SELECT rowid, data FROM {table}").fetchall()
            assert blobs and all(blob[:4] == b"PAR1" for _, blob in blobs)
            for rowid, blob in blobs:
                ipc = io.BytesIO()
                pl.read_parquet(io.BytesIO(blob)).write_ipc(ipc, compression="lz4")
                db.execute(f"UPDATE {table} SET data = ? WHERE rowid = ?", (ipc.getvalue(), rowid))
        db.execute("UPDATE geonorm_meta SET value = '4' WHERE name = 'layout'")
    with Cache(path) as cache:
        again = answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
        layout = cache.conn.execute("SELECT value FROM geonorm_meta WHERE name = 'layout'")
        assert layout.fetchone() == (str(CACHE_SCHEMA),)
    assert again.from_cache == again.distinct and again.resolved == 0
    assert again.mapping() == first.mapping()


def test_a_decision_made_after_the_first_run_shows_in_the_warm_run(resolver, tmp_path):
    with Cache(tmp_path / "c.sqlite") as cache:
        before, _ = _by_columns(_TEXTS, resolver, cache, 0.7)
        cache.put_overrides(
            [
                {"key": resolver.key("Valencia"), "text": "Valencia", "country": "ES"},
                {"key": resolver.key("Lagos"), "text": "Lagos", "not_a_place": 1},
            ]
        )
        after, table = _by_columns(_TEXTS, resolver, cache, 0.7)
        reference = _by_objects(_TEXTS, resolver, cache, 0.7)
    assert after == reference and table.decided == 2
    assert before["Valencia"].reason != "reviewed"
    assert after["Valencia"][:1] + after["Valencia"][6:] == ("ES", "reviewed", "matched")
    assert after["Lagos"].status == Status.NOT_A_PLACE.value


class _Other(Resolver):
    """The same resolver under another version: what a new index or resolver release is."""

    def __init__(self, base: Resolver, version: str) -> None:
        self.__dict__.update(base.__dict__)
        self._version = version

    @property
    def version(self) -> str:
        return self._version


def test_answers_of_another_version_are_made_again(resolver, tmp_path):
    old, new = _Other(resolver, "old-version"), _Other(resolver, "new-version")
    with Cache(tmp_path / "c.sqlite") as cache:
        _by_columns(_TEXTS, old, cache, 0.7)
        # Wrong answers stored under the old version must never be served to the new one.
        cache.conn.execute("UPDATE resolution SET country = 'ZZ'")
        mapping, table = _by_columns(_TEXTS, new, cache, 0.7)
        assert table.resolved == table.distinct and table.from_cache == 0
        again, table = _by_columns(_TEXTS, new, cache, 0.7)
        assert table.from_cache == table.distinct
        packs = cache.conn.execute("SELECT DISTINCT version FROM answer_pack").fetchall()
    assert "ZZ" not in {g.country for g in mapping.values()}
    assert mapping == again == _by_objects(_TEXTS, resolver, None, 0.7)
    assert packs == [("new-version",)]  # the packs of the other version are dropped


def test_status_of_each_combination_is_status_at(tmp_path):
    """``status_at`` asked per distinct combination gives each row what it gives the row,
    confidences on either side of the threshold and NaN (which reaches nothing) included."""
    confidences = [0.0, 0.69, 0.6999999999999999, 0.7, 0.7000000000000001, 1.0, float("nan")]
    rows = [
        (Status(s), Reason(r), country, conf)
        for s, r, country, conf in itertools.product(
            [s.value for s in Status], [r.value for r in Reason], ["", "FR", None], confidences
        )
    ]
    frame = pl.DataFrame(
        {
            "key": [f"k{i}" for i in range(len(rows))],
            "status": [r[0].value for r in rows],
            "reason": [r[1].value for r in rows],
            "country": [r[2] for r in rows],
            "confidence": [r[3] for r in rows],
        }
    )
    got = columnar._with_status(frame, 0.7).get_column("status").to_list()
    want = [status_at(Resolution(s, r, c, confidence=x), 0.7).value for s, r, c, x in rows]
    assert got == want


def test_numbers_in_text_formats_are_written_as_python_writes_them():
    rng = random.Random(5)
    numbers = [round(rng.uniform(-180, 180), rng.randint(0, 8)) for _ in range(20_000)]
    numbers += [None, -0.0, 0.0, 1e-7, 2.5e-5, 0.0005, 123456789.123456, 1e300, float("nan")]
    for decimals in (3, 5):
        got = _text_column(pl.Series("x", numbers, dtype=pl.Float64), decimals).to_list()
        assert got == ["" if x is None else f"{x:.{decimals}f}" for x in numbers]
    row = GeoRow("FR", "", "Paris", 48.85341, 2.3488, 0.9, "city", "matched")
    assert as_text_row(row)[3:6] == ["48.85341", "2.34880", "0.900"]


def _people(path, texts):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(["member", "location"])
        writer.writerows([f"m{i}", "" if t is None else t] for i, t in enumerate(texts))


@pytest.mark.parametrize("suffix", [".csv", ".tsv", ".parquet", ".jsonl"])
def test_warm_output_is_byte_identical_to_cold_and_to_a_fresh_cache(resolver, tmp_path, suffix):
    src = tmp_path / "people.csv"
    _people(src, _TEXTS * 3)
    outs = [tmp_path / f"out{i}{suffix}" for i in range(3)]
    clean_file(src, "location", outs[0], cache=tmp_path / "a.sqlite", resolver=resolver)
    summary = clean_file(src, "location", outs[1], cache=tmp_path / "a.sqlite", resolver=resolver)
    clean_file(src, "location", outs[2], cache=None, resolver=resolver)
    assert summary.resolved == 0 and summary.cache_hits == summary.distinct
    assert outs[0].read_bytes() == outs[1].read_bytes() == outs[2].read_bytes()


def test_a_cache_of_the_previous_layout_gets_the_new_tables_and_keeps_its_answers(tmp_path):
    path = tmp_path / "c.sqlite"
    with Cache(path) as cache:
        cache.put_many({"oslo": Resolution(Status.MATCHED, Reason.CITY, "NO")}, "v")
    with sqlite3.connect(path) as db:  # as the previous layout left it
        for table in ("text_key", "answer_pack", "prior_pack"):
            db.execute(f"DROP TABLE {table}")
        db.execute("UPDATE geonorm_meta SET value = '3' WHERE name = 'layout'")
    with Cache(path) as cache:
        assert cache.get_many(["oslo"], "v")["oslo"].country == "NO"
        assert cache.packed_answers(pl.Series(["Oslo"]), "v") is None
    with sqlite3.connect(path) as db:
        layout = db.execute("SELECT value FROM geonorm_meta WHERE name = 'layout'").fetchone()
    assert layout == (str(CACHE_SCHEMA),) and CACHE_SCHEMA == 5


def test_a_damaged_pack_of_answers_is_named_with_a_hint(resolver, tmp_path):
    with Cache(tmp_path / "c.sqlite") as cache:
        answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
        cache.conn.execute("UPDATE answer_pack SET data = x'00ff00ff'")
        with pytest.raises(CacheError) as err:
            answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
    assert "damaged" in err.value.message and "backup" in err.value.hint


def test_a_damaged_stored_answer_is_named_with_a_hint(resolver, tmp_path):
    with Cache(tmp_path / "c.sqlite") as cache:
        answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
        cache.conn.execute("DELETE FROM answer_pack")
        cache.conn.execute("UPDATE resolution SET reason = 'no-such-reason'")
        with pytest.raises(CacheError) as err:
            answer_table(_values(_TEXTS), resolver=resolver, cache=cache)
    assert "damaged" in err.value.message


_ASCII_MIX = "aAzZbTXc09_ .,-'/()#&\t\n\x0b\x0c\r\x1c\x1d\x1e\x1f\x00\x7f"


def _labelled_texts() -> list[str]:
    texts = []
    for name in ("locations_dev.csv", "locations_fresh.csv", "locations_more.csv"):
        with open(Path(__file__).parent / "data" / name, encoding="utf-8") as fh:
            texts += [r["text"] for r in csv.DictReader(fh)]
    return texts


def _check_plain_keys(texts: list[str]) -> int:
    """``plain_keys`` gives ``normalize_key``'s key wherever it gives one; how many."""
    got = columnar.plain_keys(pl.Series(texts, dtype=pl.String)).to_list()
    for text, key in zip(texts, got, strict=True):
        if key is not None:
            assert key == normalize_key(text), repr(text)
    return sum(k is not None for k in got)


def test_plain_keys_are_normalize_key():
    """On the labelled sets, with case, spacing and length variants of each text."""
    base = _labelled_texts()
    rng = random.Random(3)
    texts = [*base, *(t.upper() for t in base), *(t.lower() for t in base)]
    texts += [f" {t}\t\x1c {rng.choice(base)}  " for t in base]
    texts += ["", " ", "\x1f", "a" * 500, "a" * 501, "ab " * 200, "CAN", "Can", "CANADA"]
    plain = _check_plain_keys(texts)
    assert plain > len(texts) / 2  # most texts are plain: the fast path is taken
    # Every ASCII whitespace Python's ``re`` knows is one the polars pattern collapses.
    spaces = {chr(c) for c in range(128) if re.fullmatch(r"\s", chr(c))}
    assert _check_plain_keys([f"a{c}{c}b" for c in spaces]) == len(spaces)


@given(st.text(alphabet=_ASCII_MIX, max_size=40))
@settings(max_examples=400, deadline=None)
def test_plain_keys_match_normalize_key_on_any_ascii(text):
    _check_plain_keys([text, text.upper(), f"  {text} ", text * 3])
