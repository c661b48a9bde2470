"""ISO 3166 codes and city lookup, one place for every part of geonorm.

pycountry is the source of truth for ISO 3166-1 and ISO 3166-2. Kosovo's
user-assigned code XK (alpha-3 XKX), used by the World Bank and GeoNames, is
the one code added; retired codes (CS, AN, YU, …) are not current countries
and give None.

Two lookup styles, as in pycountry: ``country`` and ``subdivision_country``
never raise and give None for anything they do not know; ``country_name`` and
``alpha3`` always give a string.
"""

from __future__ import annotations

import pycountry

from .resolve.index import Place, PlaceIndex
from .resolve.normalize import fold

__all__ = [
    "KOSOVO",
    "alpha3",
    "country",
    "country_name",
    "find_city",
    "subdivision_country",
]

KOSOVO = "XK"
_KOSOVO_ALPHA3 = "XKX"
_KOSOVO_NAME = "Kosovo"
# Origins of index names that name a country (not its codes or a postal abbreviation).
_NAME_ORIGINS = ("name", "alias", "translation")


def country(
    value: str,
    *,
    numeric: bool = False,
    names: bool = False,
    index: PlaceIndex | None = None,
) -> str | None:
    """The ISO 3166-1 alpha-2 code ``value`` stands for, or None.

    Always accepted: an alpha-2 or alpha-3 code in any case, spaces around it
    ignored (``fr``, ``FRA``; ``XK``/``XKX`` for Kosovo). With ``numeric``,
    also the numeric code (``250``, ``4`` for ``004``). With ``names``, also
    anything ``pycountry.countries.lookup`` knows: the English name, official
    name, common name or flag. With an ``index``, last of all a name the place
    index knows in any language (``Deutschland``), when it names one country.
    """
    v = value.strip()
    if not v:
        return None
    code = _code(v, numeric=numeric)
    if code is None and names:
        code = _pycountry_name(v)
    if code is None and index is not None:
        code = _index_name(index, v)
    return code


def _code(v: str, *, numeric: bool) -> str | None:
    up = v.upper()
    if up in (KOSOVO, _KOSOVO_ALPHA3):
        return KOSOVO
    c = None
    if numeric and v.isdigit():
        c = pycountry.countries.get(numeric=v.zfill(3))
    elif len(up) == 2 and up.isalpha():
        c = pycountry.countries.get(alpha_2=up)
    elif len(up) == 3 and up.isalpha():
        c = pycountry.countries.get(alpha_3=up)
    return c.alpha_2 if c else None


def _pycountry_name(v: str) -> str | None:
    try:
        return pycountry.countries.lookup(v).alpha_2
    except LookupError:
        return None


def _index_name(index: PlaceIndex, v: str) -> str | None:
    found = {
        h.place.cc
        for h in index.lookup(fold(v))
        if h.place.kind == "country" and h.origin in _NAME_ORIGINS
    }
    return found.pop() if len(found) == 1 else None


def alpha3(code: str) -> str:
    """The alpha-3 code of an alpha-2 code (``XKX`` for Kosovo); '' when pycountry has none."""
    if code.upper() == KOSOVO:
        return _KOSOVO_ALPHA3
    c = pycountry.countries.get(alpha_2=code)
    return c.alpha_3 if c else ""


def country_name(code: str) -> str:
    """The short English name of an alpha-2 code (pycountry's common name where it has
    one, e.g. "Taiwan", else its name); the code itself when pycountry has none."""
    if code.upper() == KOSOVO:
        return _KOSOVO_NAME
    c = pycountry.countries.get(alpha_2=code)
    return (getattr(c, "common_name", None) or c.name) if c else code


def subdivision_country(code: str) -> str | None:
    """The alpha-2 country of an ISO 3166-2 subdivision code (any level), or None."""
    s = pycountry.subdivisions.get(code=code.strip())
    return s.country_code if s else None


def find_city(
    index: PlaceIndex,
    country: str,
    name: str,
    subdivision: str = "",
    *,
    fallback: bool = False,
) -> Place | None:
    """The most populous city called ``name`` in ``country`` in the place index, or None.

    A ``subdivision`` the index knows (a first-level ISO 3166-2 code) keeps only
    the cities in it; with ``fallback``, a name with no city there is looked for
    in the whole country instead. A subdivision the index does not know is
    ignored.
    """
    places = [
        h.place
        for h in index.lookup(fold(name))
        if h.place.kind == "city" and h.place.cc == country
    ]
    if subdivision and subdivision in index.subdivisions:
        inside = [p for p in places if p.sub == subdivision]
        places = (inside or places) if fallback else inside
    return max(places, key=lambda p: p.pop) if places else None
