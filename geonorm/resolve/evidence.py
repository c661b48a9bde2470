"""Stages for evidence that is not a name: coordinates and time-zone names.

Both follow the ``Stage`` protocol of ``stages.py`` and read what the normaliser
took out of the text (``Query.coordinates``, ``Query.zones``); their mentions
belong to the whole text (part −1).

- ``CoordinateStage``: the GeoNames place of the index nearest to a point
  (``NearestPlaces``, a ``scipy.spatial.cKDTree`` over unit vectors, built once
  per process on first use). Within ``NEAR_KM`` the point names that place and
  its country (two mentions: the place, and its country as the container that
  confirms it); from there to ``FAR_KM`` only the country, with less certainty
  the further it is; beyond, nothing (the open sea).
- ``TimeZoneStage``: the country of an IANA zone name (``timezones.py``); a zone
  the database shares between several countries is less certain.
"""

from __future__ import annotations

import math
import sqlite3
import threading
from collections.abc import Sequence
from pathlib import Path

from .coordinates import EARTH_RADIUS_KM
from .index import Place, PlaceIndex
from .normalize import Query
from .stages import Mention, Reading, Span
from .timezones import zone

__all__ = [
    "FAR_KM",
    "NEAR_KM",
    "CoordinateStage",
    "NearestPlaces",
    "TimeZoneStage",
    "nearest_places",
]

# A point this close to a place names it: a town's built-up area and its
# surroundings (from memory).
NEAR_KM = 25.0
# Up to this far, the nearest place's country is still the likely one; beyond,
# a point is at sea or in empty land (from memory).
FAR_KM = 100.0
# Certainty of the country of a point between NEAR_KM and FAR_KM, as a similarity
# (``Reading.similarity``, which lowers the evidence score): 1 at NEAR_KM, falling
# linearly to this at FAR_KM (from memory).
FAR_SIMILARITY = 0.75
# Certainty of a zone's country: a person may keep a zone set elsewhere (from memory),
# and a zone shared by several countries may be set by someone in another of them
# (from memory).
ZONE_SIMILARITY = 0.97
SHARED_ZONE_SIMILARITY = 0.9


def _unit(lat: float, lon: float) -> tuple[float, float, float]:
    la, lo = math.radians(lat), math.radians(lon)
    return (math.cos(la) * math.cos(lo), math.cos(la) * math.sin(lo), math.sin(la))


class NearestPlaces:
    """The index's cities in a k-d tree of unit vectors (chord distance ranks like
    great-circle distance)."""

    def __init__(self, path: Path) -> None:
        from scipy.spatial import cKDTree

        db = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            rows = db.execute(
                "SELECT id, lat, lon FROM place WHERE kind = 'city' AND lat IS NOT NULL"
                " AND lon IS NOT NULL ORDER BY id"
            ).fetchall()
        finally:
            db.close()
        self.ids = [r[0] for r in rows]
        self.tree = cKDTree([_unit(r[1], r[2]) for r in rows]) if rows else None

    def nearest(self, lat: float, lon: float) -> tuple[int, float] | None:
        """The id of the place nearest to the point and its great-circle distance in km."""
        if self.tree is None:
            return None
        chord, i = self.tree.query(_unit(lat, lon))
        km = 2 * EARTH_RADIUS_KM * math.asin(min(1.0, float(chord) / 2))
        return self.ids[int(i)], km


_trees: dict[Path, NearestPlaces] = {}
_trees_lock = threading.Lock()


def nearest_places(index: PlaceIndex) -> NearestPlaces:
    """The tree of ``index``'s places, built on first use, once per process."""
    with _trees_lock:
        tree = _trees.get(index.path)
        if tree is None:
            tree = _trees[index.path] = NearestPlaces(index.path)
        return tree


class CoordinateStage:
    """Coordinates: the nearest place and its country (see the module's notes)."""

    name = "coordinates"

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    def resolve(self, query: Query, spans: Sequence[Span] = ()) -> list[Mention]:
        out: list[Mention] = []
        for lat, lon in query.coordinates:
            found = nearest_places(self.index).nearest(lat, lon)
            if found is None:
                continue
            place = self.index.place(found[0])
            out.extend(self._mentions(f"{lat:.5f},{lon:.5f}", place, found[1]))
        return out

    def _mentions(self, text: str, place: Place, km: float) -> list[Mention]:
        country = self.index.countries.get(place.cc)
        if km <= NEAR_KM:
            out = [Mention(text, -1, 0, [Reading(place, self.name, 1.0)], source=self.name)]
            if country is not None:
                out.append(
                    Mention(text, -1, 1, [Reading(country, self.name, 1.0)], source=self.name)
                )
            return out
        if km <= FAR_KM and country is not None:
            share = (km - NEAR_KM) / (FAR_KM - NEAR_KM)
            similarity = 1.0 - (1.0 - FAR_SIMILARITY) * share
            reading = Reading(country, self.name, 1.0, similarity)
            return [Mention(text, -1, 0, [reading], source=self.name)]
        return []


class TimeZoneStage:
    """IANA time-zone names: the country the database gives the zone."""

    name = "time_zone"

    def __init__(self, index: PlaceIndex) -> None:
        self.index = index

    def resolve(self, query: Query, spans: Sequence[Span] = ()) -> list[Mention]:
        out = []
        for name in query.zones:
            z = zone(name)
            country = self.index.countries.get(z.country) if z is not None else None
            if z is None or country is None:
                continue
            similarity = SHARED_ZONE_SIMILARITY if z.shared else ZONE_SIMILARITY
            reading = Reading(country, self.name, 1.0, similarity)
            out.append(Mention(z.name, -1, 0, [reading], source=self.name))
        return out
