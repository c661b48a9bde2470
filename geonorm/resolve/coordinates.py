"""Geographic coordinates typed into a location field: finding and reading them.

Two forms are read, anywhere in the text:

- decimal degrees, latitude first: ``52.52, 13.40``, ``-33.87 151.21``
  (each number with a decimal point or a degree sign, so that ``12, 34`` stays
  a pair of house numbers);
- degrees with minutes, seconds and hemisphere letters, in either order:
  ``33°52′S 151°12′E``, ``40.4168° N, 3.7038° W``, ``N 40°26′46″ W 79°58′56″``;
- either of them labelled (``lat=41.0082 lon=28.9784``, ``lng: 28.97``, in
  either order) or as a geo URI (``geo:38.7223,-9.1393``, RFC 5870).

A pair is kept only when it is valid: latitude within ±90, longitude within
±180, minutes and seconds below 60, one north/south and one east/west letter
(never with a sign as well). This module only reads text; which place a point
is near is ``evidence.NearestPlaces``' job.
"""

from __future__ import annotations

import math
import re

__all__ = ["EARTH_RADIUS_KM", "find_coordinates", "great_circle_km"]

# Mean Earth radius (IUGG), the usual radius for great-circle distances.
EARTH_RADIUS_KM = 6371.0088


def _component(p: str) -> str:
    """One coordinate: an optional hemisphere letter before, a sign, degrees, optional
    minutes and seconds, an optional hemisphere letter after (group names prefixed ``p``)."""
    return (
        rf"(?:(?P<{p}label>lat(?:itude)?|lng|lon(?:g(?:itude)?)?)\s*[=:]?\s*)?"
        rf"(?:(?P<{p}pre>[nsew])\s*)?"
        rf"(?P<{p}sign>[-+−])?"
        rf"(?P<{p}deg>\d{{1,3}}(?:\.\d+)?)(?:\s*(?P<{p}mark>°))?"
        rf"(?:\s*(?P<{p}min>\d{{1,2}}(?:\.\d+)?)\s*['′’]"
        rf"(?:\s*(?P<{p}sec>\d{{1,2}}(?:\.\d+)?)\s*(?:\"|″|′′|''|’’|”))?)?"
        # A letter after only when there was none before ("N 40°26′ W 79°58′").
        rf"(?({p}pre)|(?:\s*(?P<{p}post>[nsew])(?!\w))?)"
    )


_PAIR = re.compile(
    r"(?<![\w.°′'’])(?:geo:)?" + _component("a") + r"(?:\s*[,;/]\s*|\s+)" + _component("b"),
    re.IGNORECASE,
)
_MAY_HOLD = re.compile(r"\d[.°]|\d\s*['′’]")  # a cheap test before the full pattern


def _value(m: re.Match[str], p: str) -> tuple[float, str] | None:
    """Signed degrees and the hemisphere letter ('' without one) of one component."""
    deg, minutes, seconds = m.group(f"{p}deg"), m.group(f"{p}min"), m.group(f"{p}sec")
    pre, post, sign = m.group(f"{p}pre"), m.group(f"{p}post"), m.group(f"{p}sign")
    if pre and post:
        return None
    letter = (pre or post or "").lower()
    if letter and sign:
        return None  # "-33.87 S" says south twice, or contradicts itself
    if minutes is not None and "." in deg:
        return None  # fractional degrees and minutes at once
    value = float(deg)
    for part, scale in ((minutes, 60.0), (seconds, 3600.0)):
        if part is not None:
            if float(part) >= 60:
                return None
            value += float(part) / scale
    if sign in ("-", "−") or letter in ("s", "w"):
        value = -value
    return value, letter


def _axis_of(letter: str) -> str:
    return "n" if letter in ("n", "s") else "e"


def _marked(m: re.Match[str], p: str) -> bool:
    """A bare number counts as a coordinate only with a decimal point, degree sign or minutes."""
    return bool(m.group(f"{p}mark") or m.group(f"{p}min") or "." in m.group(f"{p}deg"))


def _axis(label: str | None) -> str:
    """'n' for a latitude label, 'e' for a longitude label, '' for none."""
    if not label:
        return ""
    return "n" if label.lower().startswith("lat") else "e"


def _ordered(
    m: re.Match[str], a: tuple[float, str], b: tuple[float, str]
) -> tuple[float, float] | None:
    """(latitude, longitude) from the two components, ordered by their labels or
    hemisphere letters, else latitude first; None when they contradict each other."""
    (va, la), (vb, lb) = a, b
    xa, xb = _axis(m.group("alabel")), _axis(m.group("blabel"))
    if xa or xb:
        if {xa, xb} != {"n", "e"} or (la and _axis_of(la) != xa) or (lb and _axis_of(lb) != xb):
            return None  # one label of each axis, agreeing with any hemisphere letter
        return (va, vb) if xa == "n" else (vb, va)
    if la or lb:
        if not (la and lb) or {_axis_of(la), _axis_of(lb)} != {"n", "e"}:
            return None  # one letter of each axis, or none at all
        return (va, vb) if _axis_of(la) == "n" else (vb, va)
    if not (_marked(m, "a") and _marked(m, "b")):
        return None
    return va, vb


def _read(m: re.Match[str]) -> tuple[float, float] | None:
    """The (latitude, longitude) a matched pair stands for, or None when it is not valid."""
    a, b = _value(m, "a"), _value(m, "b")
    point = _ordered(m, a, b) if a is not None and b is not None else None
    if point is None:
        return None
    lat, lon = point
    if abs(lat) > 90 or abs(lon) > 180:
        return None
    if lat == 0 and lon == 0:
        return None  # "0.0, 0.0" is what a form stores for no position at all
    return lat, lon


def find_coordinates(text: str) -> tuple[list[tuple[float, float]], str]:
    """The valid coordinate pairs in ``text`` and the text with each replaced by a comma."""
    if not _MAY_HOLD.search(text):
        return [], text
    found: list[tuple[float, float]] = []

    def take(m: re.Match[str]) -> str:
        point = _read(m)
        if point is None:
            return m.group(0)
        found.append(point)
        return ","  # the text around a pair is read as parts of its own

    rest = _PAIR.sub(take, text)
    return found, rest


def great_circle_km(a: tuple[float, float], b: tuple[float, float]) -> float:
    """Distance in km between two (latitude, longitude) points (haversine formula)."""
    la1, lo1, la2, lo2 = map(math.radians, (*a, *b))
    h = (
        math.sin((la2 - la1) / 2) ** 2
        + math.cos(la1) * math.cos(la2) * math.sin((lo2 - lo1) / 2) ** 2
    )
    return 2 * EARTH_RADIUS_KM * math.asin(min(1.0, math.sqrt(h)))
