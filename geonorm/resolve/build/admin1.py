"""GeoNames first-level areas (admin1 codes) matched to ISO 3166-2 subdivisions."""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Iterable
from typing import Any

from ..normalize import fold

__all__ = ["map_admin1"]

Area = tuple[str, str]  # (country, GeoNames admin1 code)

# Scores (from memory): the nearest centroid scores 1, a subdivision named like
# one of an area's three largest places 0.6 more, one whose code suffix is the
# admin1 code 0.2 more.
NAMED_BONUS = 0.6
CODE_BONUS = 0.2
MIN_ASSIGNED = 0.2  # a one-to-one pair scoring less is left unmapped
MIN_LEFTOVER = 0.5  # an area left over takes its best subdivision when it scores this much


def _distance_deg2(a: tuple[float, float], b: tuple[float, float]) -> float:
    # Squared equirectangular distance: enough to rank nearest centroids.
    dlat = a[0] - b[0]
    dlon = (a[1] - b[1]) * math.cos(math.radians((a[0] + b[0]) / 2))
    return dlat * dlat + dlon * dlon


def _centre(members: list[dict[str, Any]]) -> tuple[float, float]:
    """Mean position of an area's places."""
    return (
        sum(c["latitude"] for c in members) / len(members),
        sum(c["longitude"] for c in members) / len(members),
    )


def _nearness(
    centre: tuple[float, float], located: dict[str, tuple[float, float]], scale: float
) -> dict[str, float]:
    """How near each located subdivision is to an area's centre; the nearest scores 1."""
    share = {
        code: math.exp(-math.sqrt(_distance_deg2(centre, ll)) / scale)
        for code, ll in located.items()
    }
    top = max(share.values(), default=1.0) or 1.0
    return {code: v / top for code, v in share.items()}


def _named(members: list[dict[str, Any]], name_to_sub: dict[str, str]) -> set[str]:
    """Subdivisions named like one of an area's three largest places."""
    largest = sorted(members, key=lambda c: -int(c.get("population") or 0))[:3]
    return {
        name_to_sub[fold(n)]
        for c in largest
        for n in (c["name"], *(c.get("alternatenames") or ()))
        if fold(n) in name_to_sub
    }


def _country_scores(
    cc: str, areas: dict[Area, list[dict[str, Any]]], subs: dict[str, dict[str, Any]]
) -> dict[tuple[Area, str], float]:
    """Score of each (area, subdivision) pair of one country."""
    located = {code: tuple(s["latLng"]) for code, s in subs.items() if s.get("latLng")}
    name_to_sub: dict[str, str] = {}
    for code, s in subs.items():
        for n in s["names"]:
            name_to_sub.setdefault(fold(n), code)
    centre = {key: _centre(members) for key, members in areas.items()}
    nearest = sorted(
        min((math.sqrt(_distance_deg2(centre[k], ll)) for ll in located.values()), default=1.0)
        for k in areas
    )
    scale = max(0.3, nearest[len(nearest) // 2]) if nearest else 1.0
    table: dict[tuple[Area, str], float] = {}
    for key, members in areas.items():
        share = _nearness(centre[key], located, scale)
        for hit in _named(members, name_to_sub):
            share[hit] = share.get(hit, 0.0) + NAMED_BONUS
        direct = f"{cc}-{key[1]}"
        if direct in subs:
            share[direct] = share.get(direct, 0.0) + CODE_BONUS
        for code, sc in share.items():
            table[(key, code)] = sc
    return table


def _assign(table: dict[tuple[Area, str], float], keys: Iterable[Area]) -> dict[Area, str]:
    """One subdivision per area so that the total score is largest; areas left over
    (more GeoNames areas than ISO units) take their best subdivision, shared."""
    from scipy.optimize import linear_sum_assignment

    codes = sorted({code for _, code in table})
    rows = sorted(keys)
    matrix = [[table.get((k, c), 0.0) for c in codes] for k in rows]
    mapping: dict[Area, str] = {}
    if codes:
        for ri, ci in zip(*linear_sum_assignment(matrix, maximize=True), strict=True):
            if matrix[ri][ci] >= MIN_ASSIGNED:
                mapping[rows[ri]] = codes[ci]
    for k in rows:
        if k not in mapping:
            best = max(((table.get((k, c), 0.0), c) for c in codes), default=(0.0, ""))
            if best[0] >= MIN_LEFTOVER:
                mapping[k] = best[1]
    return mapping


def map_admin1(
    cities: Iterable[dict[str, Any]], top_subs: dict[str, dict[str, dict[str, Any]]]
) -> dict[Area, str]:
    """Map GeoNames (country, admin1 code) to a first-level ISO 3166-2 code.

    GeoNames admin1 codes are not ISO codes (Bavaria is DE/02). An area scores
    each subdivision by how close the mean position of its places is to the
    subdivision's centroid (the nearest scores 1), plus bonuses for a matching
    name or code. Areas are then assigned one to one so that the total score is
    largest (``scipy.optimize.linear_sum_assignment``).
    """
    by_country: dict[str, dict[Area, list[dict[str, Any]]]] = defaultdict(dict)
    for c in cities:
        if c.get("admin1code"):
            key = (c["countrycode"], c["admin1code"])
            by_country[key[0]].setdefault(key, []).append(c)
    mapping: dict[Area, str] = {}
    for cc, areas in by_country.items():
        subs = top_subs.get(cc, {})
        if subs:
            mapping.update(_assign(_country_scores(cc, areas, subs), areas))
    return mapping
