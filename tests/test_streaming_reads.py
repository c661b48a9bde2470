"""Streaming a file too large to hold in memory: polars reads it in bounded chunks while
geonorm reads and writes it (``formats._bounded_reads``), a setting the user gave polars
stays, and nothing is left set afterwards."""

from __future__ import annotations

import os

import polars as pl

from geonorm.batch import formats
from geonorm.batch.clean import clean_file


def test_bounded_reads_set_polars_chunks_for_the_block_only(monkeypatch):
    monkeypatch.delenv("POLARS_CSV_CHUNK_SIZE", raising=False)
    monkeypatch.setenv("POLARS_NO_FAST_FILE_COUNT", "0")  # the user's own setting
    with formats._bounded_reads():
        assert os.environ["POLARS_CSV_CHUNK_SIZE"] == formats._STREAMING["POLARS_CSV_CHUNK_SIZE"]
        assert os.environ["POLARS_NO_FAST_FILE_COUNT"] == "0"
    assert "POLARS_CSV_CHUNK_SIZE" not in os.environ
    assert os.environ["POLARS_NO_FAST_FILE_COUNT"] == "0"
    with formats._bounded_reads(False):
        assert "POLARS_CSV_CHUNK_SIZE" not in os.environ


def test_a_streamed_run_reads_and_writes_in_bounded_chunks(resolver, tmp_path, monkeypatch):
    for name in formats._STREAMING:
        monkeypatch.delenv(name, raising=False)
    seen: dict[str, str | None] = {}
    real_sink, real_collect = pl.LazyFrame.sink_csv, pl.LazyFrame.collect

    def sink(self, *args, **kwargs):
        seen["sink"] = os.environ.get("POLARS_CSV_CHUNK_SIZE")
        return real_sink(self, *args, **kwargs)

    def collect(self, *args, **kwargs):
        if kwargs.get("engine") == "streaming":
            seen["streaming collect"] = os.environ.get("POLARS_CSV_CHUNK_SIZE")
        return real_collect(self, *args, **kwargs)

    monkeypatch.setattr(pl.LazyFrame, "sink_csv", sink)
    monkeypatch.setattr(pl.LazyFrame, "collect", collect)
    monkeypatch.setattr(formats, "IN_MEMORY_BYTES", 0)  # every file is streamed
    src, out = tmp_path / "in.csv", tmp_path / "out.csv"
    src.write_text("id,loc\n1,Oslo\n2,\n3,Lyon\n", encoding="utf-8")
    clean_file(src, "loc", out, resolver=resolver, workers=1)
    chunk = formats._STREAMING["POLARS_CSV_CHUNK_SIZE"]
    assert seen == {"sink": chunk, "streaming collect": chunk}
    assert not any(name in os.environ for name in formats._STREAMING)
    assert pl.read_csv(out).height == 3


def test_a_streamed_parquet_output_keeps_polars_own_chunks(resolver, tmp_path, monkeypatch):
    """Parquet row groups follow how the input was read: its bytes stay those of polars'
    own chunks."""
    for name in formats._STREAMING:
        monkeypatch.delenv(name, raising=False)
    seen: list[str | None] = []
    real_sink = pl.LazyFrame.sink_parquet

    def sink(self, *args, **kwargs):
        seen.append(os.environ.get("POLARS_CSV_CHUNK_SIZE"))
        return real_sink(self, *args, **kwargs)

    monkeypatch.setattr(pl.LazyFrame, "sink_parquet", sink)
    monkeypatch.setattr(formats, "IN_MEMORY_BYTES", 0)
    src, out = tmp_path / "in.csv", tmp_path / "out.parquet"
    src.write_text("id,loc\n1,Oslo\n2,\n3,Lyon\n", encoding="utf-8")
    clean_file(src, "loc", out, resolver=resolver, workers=1)
    assert seen == [None]
    assert pl.read_parquet(out).height == 3
