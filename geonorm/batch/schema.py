"""The geo columns every output carries, defined once.

A cleaned file appends these eight fields (with a prefix, ``geo_`` by default)
to every input row. ``GeoRow`` is one row of them; it is a tuple, so writers
can treat it positionally, and it has names, so readers never count positions.
"""

from __future__ import annotations

from typing import NamedTuple

from ..resolve.resolution import Resolution

__all__ = ["GEO_FIELDS", "NUMERIC_FIELDS", "GeoRow", "geo_column_names"]


class GeoRow(NamedTuple):
    """The geo values of one distinct string (numbers as numbers, missing as None)."""

    country: str
    subdivision: str
    city: str
    lat: float | None
    lon: float | None
    confidence: float
    reason: str
    status: str

    @classmethod
    def of(cls, res: Resolution) -> GeoRow:
        return cls(
            res.country,
            res.subdivision,
            res.city,
            res.lat,
            res.lon,
            round(res.confidence, 3),
            res.reason_text,
            res.status.value,
        )


GEO_FIELDS: tuple[str, ...] = GeoRow._fields
# Fields written as numbers where the format has types (Parquet, JSON Lines).
NUMERIC_FIELDS: frozenset[str] = frozenset({"lat", "lon", "confidence"})


def geo_column_names(prefix: str) -> list[str]:
    """The output column names for ``prefix`` (``geo_country`` …)."""
    return [prefix + f for f in GEO_FIELDS]
