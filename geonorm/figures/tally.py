"""Per-country figures from a cleaned file: counts, rates per million with exact
intervals, disclosure-adjusted and shrunk rates, and location quotients by group.

Definitions (also in the README):
- located rows: status ``matched`` (plus ``review`` rows with a single country
  guess when ``include_review``);
- share = count / located rows;
- per million = count / population × 10⁶, with the exact Poisson (Garwood)
  95% interval of the count carried to the rate;
- disclosure d = located rows / all rows; adjusted per million =
  count / (population × d) × 10⁶ (as if the people who gave no usable
  location were spread like those who did);
- shrunk per million: posterior mean under a Gamma prior fitted to all
  countries by the method of moments (Marshall 1991), (count + α) /
  (population/10⁶ + β);
- LQ = (count in country and group / count in country) / (count in group /
  located rows), 95% interval by the delta method on the log scale.
"""

from __future__ import annotations

import csv
import json
import math
from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from ..batch.formats import open_source, read_columns, read_header
from ..clock import utc_stamp
from ..codes import alpha3, country_name
from ..errors import InputError
from .population import PopulationTable, PopulationValue, bundled_population, read_population
from .stats import EBPrior, eb_gamma_prior, garwood, location_quotient, shrunk_rates

__all__ = ["BY_COLUMNS", "COLUMNS", "TallyResult", "tally_file"]

COLUMNS = [
    "country",
    "iso3",
    "name",
    "count",
    "count_low",
    "count_high",
    "share",
    "population",
    "population_year",
    "population_source",
    "per_million",
    "per_million_low",
    "per_million_high",
    "adjusted_per_million",
    "shrunk_per_million",
]
BY_COLUMNS = ["group", *COLUMNS, "lq", "lq_low", "lq_high", "lq_flag"]


_METHOD = {
    "share": "count / located rows",
    "per_million": "count / population × 1e6",
    "interval": "exact Poisson 95% interval of the count (Garwood 1936), divided by population",
    "adjusted_per_million": "count / (population × disclosure_share) × 1e6",
    "shrunk_per_million": "Poisson–Gamma empirical Bayes posterior mean (count + α) / "
    "(population/1e6 + β); α, β by the method of moments over all countries (Marshall 1991)",
    "lq": "(count in country and group / count in country) / (count in group / located rows); "
    "95% interval exp(ln LQ ± 1.96·sqrt(1/a − 1/b + 1/c − 1/n)), delta method",
}
_CAVEATS = (
    "Self-reported, self-selected locations: the counts describe who joined and typed a usable "
    "location, not the population; rates compare countries only as far as people everywhere "
    "are equally likely to join and to disclose."
)


@dataclass
class TallyResult:
    funnel: dict[str, int]
    rows: list[dict]
    sidecar: dict = field(default_factory=dict)


def _round(x: float | None, digits: int = 4) -> float | str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return ""
    return round(x, digits)


def _rates(count: int, pv: PopulationValue | None, d: float, shrunk: float | None) -> dict:
    low, high = garwood(count)
    row: dict[str, object] = {
        "count": count,
        "count_low": round(low, 3),
        "count_high": round(high, 3),
    }
    if pv is None:
        row.update(
            population="",
            population_year="",
            population_source="",
            per_million="",
            per_million_low="",
            per_million_high="",
            adjusted_per_million="",
            shrunk_per_million="",
        )
        return row
    pop = pv.population
    row.update(
        population=pop,
        population_year=pv.year,
        population_source=pv.source,
        per_million=_round(count / pop * 1e6),
        per_million_low=_round(low / pop * 1e6),
        per_million_high=_round(high / pop * 1e6),
        adjusted_per_million=_round(count / (pop * d) * 1e6) if d > 0 else "",
        shrunk_per_million=_round(shrunk),
    )
    return row


def tally_file(
    cleaned: str | Path,
    *,
    by: str | None = None,
    split: str | None = None,
    population: str | Path | None = None,
    year: str | int | None = None,
    include_review: bool = False,
    min_count: int = 1,
    prefix: str = "geo_",
) -> TallyResult:
    """Count the located rows of a cleaned file per country (and per group with ``by``)."""
    frame = _read_cleaned(cleaned, by, prefix)
    cc_col, st_col, rs_col = (prefix + c for c in ("country", "status", "reason"))
    funnel = _funnel(frame, st_col, rs_col)
    located = _locate(frame, cc_col, st_col, include_review)
    funnel["located"] = located.height
    d = located.height / frame.height if frame.height else 0.0
    table = read_population(population, year) if population else bundled_population()
    exposure = _Exposure.of(table)
    counts = Counter(located.get_column(cc_col).to_list())
    prior, shrunk = exposure.shrink(counts)
    if by is None:
        rows = _country_rows(counts, table, d, shrunk, min_count)
    else:
        pairs = _group_pairs(located, cc_col, by, split)
        rows = _group_rows(pairs, counts, exposure, d, min_count)
    sidecar = {
        "made_at": utc_stamp(),
        "input": str(cleaned),
        "funnel": funnel,
        "disclosure_share": round(d, 6),
        "settings": {
            "by": by,
            "split": split,
            "include_review": include_review,
            "min_count": min_count,
            "population": str(population) if population else "bundled",
            "year": year,
        },
        "population_sources": table.sources,
        "countries_without_population": sorted(c for c in counts if c not in table.values),
        "method": dict(_METHOD),
        "prior": {
            "alpha": prior.shape,
            "beta": prior.rate,
            "mean_per_million": prior.mean,
            "variance": prior.variance,
        },
        "caveats": _CAVEATS,
    }
    return TallyResult(funnel, rows, sidecar)


def _read_cleaned(cleaned: str | Path, by: str | None, prefix: str) -> pl.DataFrame:
    """The country, status and reason columns of a cleaned file (and the ``by`` column)."""
    source = open_source(cleaned)
    try:
        header = read_header(source)
        needed = [prefix + "country", prefix + "status", prefix + "reason"]
        missing = [c for c in needed if c not in header]
        if missing:
            raise InputError(
                f"{source.name} has no {', '.join(missing)} column(s): it is not a cleaned file",
                hint="run geonorm clean on it first, and tally its output",
            )
        if by is not None and by not in header:
            raise InputError(
                f"column {by!r} is not in {source.name}; its columns are: {', '.join(header)}",
                hint="pass the grouping column with `by`",
            )
        return read_columns(source, needed + ([by] if by else []))
    finally:
        source.cleanup()


def _funnel(frame: pl.DataFrame, st_col: str, rs_col: str) -> dict[str, int]:
    status = Counter(frame.get_column(st_col).to_list())
    return {
        "rows": frame.height,
        "rows_with_text": frame.height - int((frame.get_column(rs_col) == "empty").sum()),
        "matched": status.get("matched", 0),
        "review": status.get("review", 0),
        "unmatched": status.get("unmatched", 0),
        "not_a_place": status.get("not_a_place", 0),
    }


def _locate(frame: pl.DataFrame, cc_col: str, st_col: str, include_review: bool) -> pl.DataFrame:
    """The located rows: matched, plus review rows with a country guess if asked."""
    ok = pl.col(st_col) == "matched"
    if include_review:
        ok = ok | ((pl.col(st_col) == "review") & (pl.col(cc_col) != ""))
    return frame.filter(ok & (pl.col(cc_col) != ""))


@dataclass(frozen=True)
class _Exposure:
    """Every country with a population, and its population in millions."""

    table: PopulationTable
    universe: list[str]
    millions: list[float]

    @classmethod
    def of(cls, table: PopulationTable) -> _Exposure:
        universe = sorted(table.values)
        return cls(table, universe, [table.values[c].population / 1e6 for c in universe])

    def shrink(self, counts: Mapping[str, int]) -> tuple[EBPrior, dict[str, float]]:
        """The prior fitted over every country with a population (counts of zero included)
        and the shrunk rate per million of each of those countries."""
        ys = [counts.get(c, 0) for c in self.universe]
        prior = eb_gamma_prior(ys, self.millions)
        rates = shrunk_rates(ys, self.millions, prior)
        return prior, dict(zip(self.universe, rates, strict=True))


def _country_rows(
    counts: Counter[str],
    table: PopulationTable,
    d: float,
    shrunk: dict[str, float],
    min_count: int,
) -> list[dict]:
    n_located = sum(counts.values())
    rows = []
    for cc, n in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])):
        if n < min_count:
            continue
        rows.append(
            {
                "country": cc,
                "iso3": alpha3(cc),
                "name": country_name(cc),
                **_rates(n, table.get(cc), d, shrunk.get(cc)),
                "share": round(n / n_located, 6) if n_located else 0.0,
            }
        )
    return rows


def _group_pairs(
    located: pl.DataFrame, cc_col: str, by: str, split: str | None
) -> Counter[tuple[str, str]]:
    """Rows per (country, group); a row names each of its groups once ('' when none)."""
    pairs: Counter[tuple[str, str]] = Counter()
    ccs = located.get_column(cc_col).to_list()
    for cc, raw in zip(ccs, located.get_column(by).to_list(), strict=True):
        parts = [g.strip() for g in (raw.split(split) if split else [raw])]
        for g in dict.fromkeys(p for p in parts if p) or [""]:
            pairs[(cc, g)] += 1
    return pairs


def _group_rows(
    pairs: Counter[tuple[str, str]],
    counts: Counter[str],
    exposure: _Exposure,
    d: float,
    min_count: int,
) -> list[dict]:
    n_located = sum(counts.values())
    group_total: Counter[str] = Counter()
    per_group: dict[str, Counter[str]] = {}
    for (cc, g), n in pairs.items():
        group_total[g] += n
        per_group.setdefault(g, Counter())[cc] = n
    shrunk = {g: exposure.shrink(c)[1] for g, c in per_group.items()}
    rows = []
    for (cc, g), n in sorted(pairs.items(), key=lambda kv: (kv[0][1], -kv[1], kv[0][0])):
        if counts[cc] < min_count:
            continue
        lq, lo, hi = location_quotient(n, counts[cc], group_total[g], n_located)
        rows.append(
            {
                "group": g,
                "country": cc,
                "iso3": alpha3(cc),
                "name": country_name(cc),
                **_rates(n, exposure.table.get(cc), d, shrunk[g].get(cc)),
                "share": round(n / group_total[g], 6),
                "lq": _round(lq),
                "lq_low": _round(lo),
                "lq_high": _round(hi),
                "lq_flag": "over" if lo > 1 else "under" if hi < 1 else "",
            }
        )
    return rows


def write_tally(result: TallyResult, out: str | Path, by: bool) -> Path:
    out = Path(out)
    columns = BY_COLUMNS if by else COLUMNS
    try:
        with open(out, "w", encoding="utf-8", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=columns, lineterminator="\n", extrasaction="ignore")
            w.writeheader()
            w.writerows(result.rows)
        sidecar = out.with_suffix(".json")
        sidecar.write_text(
            json.dumps(result.sidecar, indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
        )
    except OSError as exc:
        raise InputError(
            f"cannot write {out} ({exc.strerror})", hint="check the folder exists and is writable"
        ) from exc
    return sidecar
