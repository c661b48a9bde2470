"""The public API and the end-to-end demo."""

from __future__ import annotations

import csv

import geonorm
from geonorm.demo import run_demo


def test_public_api_is_explicit():
    assert sorted(geonorm.__all__) == sorted(
        [
            "Cache",
            "CacheError",
            "Candidate",
            "CleanOptions",
            "CleanSummary",
            "DEFAULT_ACCEPT",
            "GeonormError",
            "IndexError_",
            "InputError",
            "PlaceIndex",
            "PlaceIndexError",
            "Query",
            "Reason",
            "RemoteError",
            "RemoteOptions",
            "Resolution",
            "Resolver",
            "Status",
            "__version__",
            "build_index",
            "clean_file",
            "load_index",
            "normalize",
            "resolve_series",
        ]
    )
    for name in geonorm.__all__:
        assert hasattr(geonorm, name)


def test_resolve_series_returns_geo_columns():
    cols = geonorm.resolve_series(["Oslo", "", "Oslo", "Lisbon / Berlin"])
    assert cols["geo_country"] == ["NO", "", "NO", ""]
    assert cols["geo_status"] == ["matched", "not_a_place", "matched", "review"]


def test_resolve_series_on_a_polars_column():
    import polars as pl

    frame = geonorm.resolve_series(pl.Series("loc", ["austin tx", None, "東京"]))
    assert isinstance(frame, pl.DataFrame)
    assert frame["geo_country"].to_list() == ["US", "", "JP"]
    assert frame["geo_lat"][1] is None


def test_demo_end_to_end(tmp_path):
    result = run_demo(tmp_path)
    summary = result["summary"]
    assert summary.rows == 20_000
    cleaned = list(
        csv.DictReader(open(tmp_path / "members_clean.csv", encoding="utf-8", newline=""))
    )
    source = list(csv.DictReader(open(geonorm.demo.demo_file(), encoding="utf-8", newline="")))
    assert [r["member_id"] for r in cleaned] == [r["member_id"] for r in source]
    assert all(r["location"] == s["location"] for r, s in zip(cleaned, source, strict=False))
    assert summary.status["matched"] / summary.rows > 0.7
    assert dict(result["top_countries"])["US"] > dict(result["top_countries"]).get("GB", 0)
    for label in (
        "review queue (top 200)",
        "per-country figures",
        "per country and station kind",
        "map (SVG)",
        "map (HTML)",
    ):
        assert result["files"][label].exists(), label
    by_kind = list(
        csv.DictReader(open(result["files"]["per country and station kind"], encoding="utf-8"))
    )
    us_lightning = next(
        r for r in by_kind if r["country"] == "US" and r["group"] == "lightning_detector"
    )
    assert (
        us_lightning["lq_flag"] == "over"
    )  # the scenario makes lightning detectors commoner in the US
    again = run_demo(tmp_path)["summary"]
    assert again.cache_hits == again.distinct


def test_resolve_series_reads_a_pandas_missing_value_as_empty():
    import pandas as pd

    frame = geonorm.resolve_series(pd.Series(["Oslo", None, float("nan")]))
    assert list(frame["geo_country"]) == ["NO", "", ""]
    assert list(frame["geo_reason"])[1:] == ["empty", "empty"]
