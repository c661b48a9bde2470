"""Writing a table held in memory (``formats.hold``): each row's geo columns are taken by
its position among the distinct values and the table is written at once; the bytes are
those the streaming join writes for a table read from disk."""

from __future__ import annotations

import polars as pl
import pytest

from geonorm.batch import formats
from geonorm.batch.clean import clean_file

# Texts a CSV writer must quote, escape or keep apart: separators, quotes, line breaks,
# an empty text and a missing one, spaces, numbers, a tab, non-ASCII text.
_ROWS = [
    ("1", "Oslo, Norway"),
    ("2", 'The "Big Apple"'),
    ("3", "Lyon\nFrance"),
    ("4", ""),
    ("5", None),
    ("6", "  Paris  "),
    ("7", "12.5"),
    ("8", "São Paulo\tBrasil"),
    ("9", "Oslo, Norway"),
    ("10", "Lyon\r\nFrance"),
    ("11", "東京"),
    ("12", None),
    ("13", "a;b|c"),
    ("14", '"'),
]


def _write_input(path, sep: str, rows=_ROWS) -> None:
    cell = formats._csv_cell
    lines = [sep.join(["id", cell('note, "x"', sep), "loc"])]
    lines += [sep.join([i, cell(f"n{i}", sep), cell(t, sep)]) for i, t in rows]
    path.write_bytes(("\n".join(lines) + "\n").encode("utf-8"))


def _clean_both(tmp_path, monkeypatch, src, suffix: str, resolver) -> tuple[bytes, bytes]:
    """The output of a run that holds the input, and of one that streams it."""
    held_writes: list[bool] = []
    real = formats._write_held

    def spy(*args, **kwargs):
        held_writes.append(real(*args, **kwargs))
        return held_writes[-1]

    monkeypatch.setattr(formats, "_write_held", spy)
    held, streamed = tmp_path / f"held{suffix}", tmp_path / f"streamed{suffix}"
    clean_file(src, "loc", held, resolver=resolver, workers=1)
    assert held_writes == [True]
    monkeypatch.setattr(formats, "IN_MEMORY_BYTES", 0)
    clean_file(src, "loc", streamed, resolver=resolver, workers=1)
    assert held_writes == [True, False]
    return held.read_bytes(), streamed.read_bytes()


@pytest.mark.parametrize(
    "sep,suffix", [(",", ".csv"), (";", ".csv"), ("\t", ".tsv"), (",", ".tsv")]
)
def test_held_and_streamed_inputs_give_the_same_bytes(resolver, tmp_path, monkeypatch, sep, suffix):
    src = tmp_path / ("in.tsv" if sep == "\t" else "in.csv")
    _write_input(src, sep)
    held, streamed = _clean_both(tmp_path, monkeypatch, src, suffix, resolver)
    assert held == streamed
    out = pl.read_csv(held, separator="\t" if suffix == ".tsv" else ",", infer_schema=False)
    assert out.get_column("loc").to_list() == [t for _, t in _ROWS]
    assert out.get_column("geo_reason").to_list()[3:5] == ["empty", "empty"]


@pytest.mark.parametrize("rows_at_once", [1, 4, 7, 14])
def test_a_held_table_written_in_slices_gives_the_streamed_bytes(
    resolver, tmp_path, monkeypatch, rows_at_once
):
    monkeypatch.setattr(formats, "_WRITE_ROWS", rows_at_once)
    src = tmp_path / "in.csv"
    _write_input(src, ",")
    held, streamed = _clean_both(tmp_path, monkeypatch, src, ".csv", resolver)
    assert held == streamed and held.count(b"geo_status") == 1


def test_held_header_only_file_gives_the_streamed_bytes(resolver, tmp_path, monkeypatch):
    src = tmp_path / "in.csv"
    _write_input(src, ",", rows=[])
    held, streamed = _clean_both(tmp_path, monkeypatch, src, ".csv", resolver)
    assert held == streamed
    assert held.decode("utf-8").splitlines()[0].endswith(",geo_status")


def test_distinct_values_of_a_held_table_keep_each_rows_position(tmp_path):
    src = tmp_path / "in.csv"
    _write_input(src, ",")
    source = formats.open_source(src)
    streamed, rows = formats.distinct_values(source, "loc")
    formats.hold(source)
    held, held_rows = formats.distinct_values(source, "loc")
    assert rows == held_rows == len(_ROWS)
    assert held.sort("value", nulls_last=True).equals(streamed.sort("value", nulls_last=True))
    values, at = source.positions["loc"]
    assert values.equals(held.get_column("value"))
    assert values.gather(at).to_list() == [t for _, t in _ROWS]


def test_a_table_not_one_row_per_value_is_not_written_by_position(tmp_path):
    src = tmp_path / "in.csv"
    _write_input(src, ",")
    source = formats.open_source(src)
    formats.hold(source)
    values, _ = formats.distinct_values(source, "loc")
    table = pl.DataFrame({"loc": values.get_column("value"), "geo_country": "NO"})
    assert formats._write_held(source, "loc", table, "csv", tmp_path / "a.csv")
    twice = pl.concat([table, table])
    assert not formats._write_held(source, "loc", twice, "csv", tmp_path / "b.csv")
    assert not (tmp_path / "b.csv").exists()
    source.positions.clear()  # a table held but never counted: no positions to take
    assert not formats._write_held(source, "loc", table, "csv", tmp_path / "c.csv")
