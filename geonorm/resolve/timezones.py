"""Time-zone names and UTC offsets typed into a location field.

A profile's location field often holds what a computer filled in: an IANA
time-zone name (``Africa/Lagos``, ``America/Argentina/Cordoba``) or an offset
(``UTC+2``, ``GMT-5``). Zone names come from the IANA time-zone database as
the ``tzdata`` package ships it (``zone.tab``, ``zone1970.tab`` and the links
in ``tzdata.zi``), read with ``importlib.resources``.

Which country a zone names:

- a zone listed in ``zone.tab`` names the country listed there: the country of
  its principal location, the city in its name (``Africa/Lagos`` → NG, although
  ``zone1970.tab`` shares that zone with nine other countries; people elsewhere
  pick their own city's name, ``Africa/Porto-Novo``, which ``zone.tab`` lists
  under BJ). A zone that ``zone1970.tab`` shares between several countries is
  marked ``shared``, for a lower confidence;
- an old name kept as a link (``Asia/Calcutta``, ``US/Pacific``) names the
  country of the zone it links to only when ``zone1970.tab`` gives that zone a
  single country; a link to a shared zone names none (``Atlantic/Jan_Mayen``
  links to ``Europe/Berlin``, yet lies in Norway);
- ``Etc/…`` zones and bare offsets (``UTC+2``, ``GMT-5``, ``UTC``) name no
  place: the text is not a place when nothing else is left.

Only names of two or more parts (``Area/Location``) are read: single-word zone
names such as ``Japan`` or ``Poland`` are country names first.
"""

from __future__ import annotations

import re
import threading
from dataclasses import dataclass
from importlib import resources

__all__ = ["Zone", "find_offsets", "find_zones", "zone", "zones"]


@dataclass(frozen=True)
class Zone:
    """A time-zone name and the country it names ('' for none)."""

    name: str  # as the database writes it ("America/Argentina/Cordoba")
    country: str  # ISO 3166-1 alpha-2, or '' (a link to a shared zone, Etc/…)
    shared: bool = False  # zone1970.tab lists several countries for it
    offset: bool = False  # an Etc/… zone: an offset, not a place


_ZONE_TEXT = re.compile(r"(?<![\w/])[a-z][\w+\-]*(?:/[\w+\-]+){1,2}(?![\w/])", re.IGNORECASE)
# "UTC", "GMT", "UTC+2", "GMT -05:00", "utc+5.5" (common practice in profile fields).
_OFFSET_TEXT = re.compile(
    r"(?<!\w)(?:utc|gmt)(?:\s*[+\-−±]\s*\d{1,2}(?:[:.]?\d{2})?)?(?!\w)", re.IGNORECASE
)


def _read(name: str) -> list[str]:
    text = (resources.files("tzdata") / "zoneinfo" / name).read_text(encoding="utf-8")
    return [line for line in text.splitlines() if line and not line.startswith("#")]


def _load() -> dict[str, Zone]:
    """Every Area/Location zone name of the database, by its casefolded form."""
    primary = {}  # zone → country, from zone.tab
    for line in _read("zone.tab"):
        cc, _, name = line.split("\t")[:3]
        primary[name] = cc
    countries = {}  # zone → countries sharing it since 1970, from zone1970.tab
    for line in _read("zone1970.tab"):
        codes, _, name = line.split("\t")[:3]
        countries[name] = codes.split(",")
    names: set[str] = set()
    links: dict[str, str] = {}  # link → the zone it stands for
    for line in _read("tzdata.zi"):
        fields = line.split()
        if fields[0] == "Z":
            names.add(fields[1])
        elif fields[0] == "L":
            links[fields[2]] = fields[1]
    out: dict[str, Zone] = {}
    for name in names | set(links) | set(primary):
        if "/" not in name:
            continue
        out[name.casefold()] = _zone(name, primary, countries, links)
    return out


def _zone(
    name: str, primary: dict[str, str], countries: dict[str, list[str]], links: dict[str, str]
) -> Zone:
    if name.startswith("Etc/"):
        return Zone(name, "", offset=True)
    if name in primary:
        return Zone(name, primary[name], shared=len(countries.get(name, [])) > 1)
    target = links.get(name, name)
    if target.startswith("Etc/"):
        return Zone(name, "", offset=True)
    sharing = countries.get(target, [])
    if len(sharing) == 1:
        return Zone(name, sharing[0])
    return Zone(name, "")


_zones: dict[str, Zone] | None = None
_lock = threading.Lock()


def zones() -> dict[str, Zone]:
    """The zone table, read from tzdata once per process."""
    global _zones
    if _zones is None:
        with _lock:
            if _zones is None:
                _zones = _load()
    return _zones


def zone(text: str) -> Zone | None:
    """The zone named exactly ``text`` (any case), or None."""
    return zones().get(text.casefold())


def find_zones(text: str) -> tuple[list[Zone], str]:
    """The zone names in ``text`` and the text with each replaced by a comma."""
    if "/" not in text:
        return [], text
    found: list[Zone] = []

    def take(m: re.Match[str]) -> str:
        z = zone(m.group(0))
        if z is None:
            return m.group(0)
        found.append(z)
        return ","

    return found, _ZONE_TEXT.sub(take, text)


def find_offsets(text: str) -> tuple[list[str], str]:
    """UTC offsets ("UTC+2", "GMT-5", "UTC") in ``text`` and the text without them."""
    lowered = text.casefold()
    if "utc" not in lowered and "gmt" not in lowered:
        return [], text
    found = [m.group(0) for m in _OFFSET_TEXT.finditer(text)]
    return found, _OFFSET_TEXT.sub(",", text) if found else text
