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
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl
import pycountry

from ..batch.formats import open_source, read_columns, read_header
from ..errors import InputError
from .population import PopulationTable, bundled_population, read_population
from .stats import eb_gamma_prior, garwood, location_quotient

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


@dataclass
class TallyResult:
    funnel: dict[str, int]
    rows: list[dict]
    sidecar: dict = field(default_factory=dict)


def _names(cc: str) -> tuple[str, str]:
    if cc == "XK":
        return "XKX", "Kosovo"
    c = pycountry.countries.get(alpha_2=cc)
    return (c.alpha_3, getattr(c, "common_name", None) or c.name) if c else ("", cc)


def _round(x: float | None, digits: int = 4) -> float | str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return ""
    return round(x, digits)


def _rates(count: int, pv, d: float, shrunk: float | None) -> dict:
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
                hint="pass the grouping column with --by",
            )
        frame = read_columns(source, needed + ([by] if by else []))
    finally:
        source.cleanup()
    cc_col, st_col, rs_col = needed
    status = Counter(frame.get_column(st_col).to_list())
    funnel = {
        "rows": frame.height,
        "rows_with_text": frame.height - int((frame.get_column(rs_col) == "empty").sum()),
        "matched": status.get("matched", 0),
        "review": status.get("review", 0),
        "unmatched": status.get("unmatched", 0),
        "not_a_place": status.get("not_a_place", 0),
    }
    ok = pl.col(st_col) == "matched"
    if include_review:
        ok = ok | ((pl.col(st_col) == "review") & (pl.col(cc_col) != ""))
    located = frame.filter(ok & (pl.col(cc_col) != ""))
    n_located = located.height
    d = n_located / frame.height if frame.height else 0.0
    funnel["located"] = n_located
    table: PopulationTable = (
        read_population(population, year) if population else bundled_population()
    )
    counts = Counter(located.get_column(cc_col).to_list())
    # The prior is fitted over every country with a population, counts of zero included.
    universe = sorted(table.values)
    exposures = [table.values[c].population / 1e6 for c in universe]
    prior = eb_gamma_prior([counts.get(c, 0) for c in universe], exposures)
    shrunk = {
        c: (counts.get(c, 0) + prior.shape) / (e + prior.rate) for c, e in zip(universe, exposures)
    }
    rows: list[dict] = []
    without_population = sorted(c for c in counts if c not in table.values)
    if by is None:
        for cc, n in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])):
            if n < min_count:
                continue
            iso3, name = _names(cc)
            rows.append(
                {
                    "country": cc,
                    "iso3": iso3,
                    "name": name,
                    **_rates(n, table.get(cc), d, shrunk.get(cc)),
                    "share": round(n / n_located, 6) if n_located else 0.0,
                }
            )
    else:
        groups_of = located.get_column(by).to_list()
        ccs = located.get_column(cc_col).to_list()
        pair: Counter[tuple[str, str]] = Counter()
        group_total: Counter[str] = Counter()
        for cc, raw in zip(ccs, groups_of):
            parts = [g.strip() for g in (raw.split(split) if split else [raw])]
            for g in dict.fromkeys(p for p in parts if p) or [""]:
                pair[(cc, g)] += 1
                group_total[g] += 1
        group_prior = {}
        for g in group_total:
            gc = [pair.get((c, g), 0) for c in universe]
            group_prior[g] = eb_gamma_prior(gc, exposures)
        for (cc, g), n in sorted(pair.items(), key=lambda kv: (kv[0][1], -kv[1], kv[0][0])):
            if counts[cc] < min_count:
                continue
            iso3, name = _names(cc)
            pv = table.get(cc)
            gp = group_prior[g]
            g_shrunk = (n + gp.shape) / (pv.population / 1e6 + gp.rate) if pv else None
            lq, lo, hi = location_quotient(n, counts[cc], group_total[g], n_located)
            flag = "over" if lo > 1 else "under" if hi < 1 else ""
            rows.append(
                {
                    "group": g,
                    "country": cc,
                    "iso3": iso3,
                    "name": name,
                    **_rates(n, pv, d, g_shrunk),
                    "share": round(n / group_total[g], 6),
                    "lq": _round(lq),
                    "lq_low": _round(lo),
                    "lq_high": _round(hi),
                    "lq_flag": flag,
                }
            )
    sidecar = {
        "made_at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
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
        "countries_without_population": without_population,
        "method": {
            "share": "count / located rows",
            "per_million": "count / population × 1e6",
            "interval": "exact Poisson 95% interval of the count (Garwood 1936), divided by population",
            "adjusted_per_million": "count / (population × disclosure_share) × 1e6",
            "shrunk_per_million": "Poisson–Gamma empirical Bayes posterior mean (count + α) / (population/1e6 + "
            "β); α, β by the method of moments over all countries (Marshall 1991)",
            "lq": "(count in country and group / count in country) / (count in group / located rows); 95% "
            "interval exp(ln LQ ± 1.96·sqrt(1/a − 1/b + 1/c − 1/n)), delta method",
        },
        "prior": {
            "alpha": prior.shape,
            "beta": prior.rate,
            "mean_per_million": prior.mean,
            "variance": prior.variance,
        },
        "caveats": "Self-reported, self-selected locations: the counts describe who joined and typed a usable "
        "location, not the population; rates compare countries only as far as people everywhere are "
        "equally likely to join and to disclose.",
    }
    return TallyResult(funnel, rows, sidecar)


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
