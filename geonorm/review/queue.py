"""The review loop: a queue of doubtful strings → a person's decisions → overrides.

``export_queue`` writes one line per distinct doubtful text of a cleaned file,
ranked by impact (rows affected × doubt), with four empty columns for the
reviewer. ``apply_decisions`` validates the filled-in file line by line and
stores the valid decisions as overrides in the cache, in one transaction;
later runs use them before any stage. Text typed by strangers is neutralised
against spreadsheet formula injection on export and restored on import.
"""

from __future__ import annotations

import csv
import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl
import pycountry

from .. import codes
from ..batch.answers import resolve_keys
from ..batch.cache import Cache
from ..batch.formats import open_source, read_columns, read_header
from ..clock import utc_stamp
from ..errors import InputError
from ..resolve.normalize import fold, normalize_key
from ..resolve.resolution import Resolution
from ..resolve.resolver import Resolver

__all__ = [
    "DECISION_COLUMNS",
    "QUEUE_COLUMNS",
    "ApplyReport",
    "Problem",
    "apply_decisions",
    "check_items",
    "export_queue",
    "neutralise",
    "restore",
    "undo",
]

DECISION_COLUMNS = ["decision_country", "decision_subdivision", "decision_city", "decision_note"]
QUEUE_COLUMNS = [
    "text",
    "rows",
    "impact",
    "guess_country",
    "guess_subdivision",
    "guess_city",
    "confidence",
    "reason",
    "alternatives",
    *DECISION_COLUMNS,
]
NOT_A_PLACE = "not_a_place"
# Characters that make a spreadsheet read a cell as a formula (OWASP, CSV injection).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_COORDS = re.compile(
    r"^(?P<name>.*?)\s*\(?\s*(?P<lat>-?\d+(?:\.\d+)?)\s*[,;]\s*(?P<lon>-?\d+(?:\.\d+)?)\s*\)?\s*$"
)


def neutralise(value: str) -> str:
    """Make a cell inert in a spreadsheet: a leading ``'`` before formula characters.

    A value that already starts with ``'`` gets one more, so ``restore`` is exact.
    """
    if value and (value.startswith(_FORMULA_START) or value.startswith("'")):
        return "'" + value
    return value


def restore(value: str) -> str:
    """Undo ``neutralise``."""
    if (
        len(value) > 1
        and value[0] == "'"
        and (value[1:].startswith(_FORMULA_START) or value[1] == "'")
    ):
        return value[1:]
    return value


_GEO_READ = ("country", "subdivision", "city", "confidence", "reason", "status")
_LOCATION_NAMES = ("location", "loc", "place", "city", "address", "where")


def _read_cleaned(
    path: str | Path, column: str | None, prefix: str, cache: Cache
) -> tuple[pl.DataFrame, str, str]:
    """The cleaned file grouped by text and geo values; its location column; the
    remote service its run used ('' for none)."""
    source = open_source(path)
    try:
        header = read_header(source)
        needed = [prefix + f for f in _GEO_READ]
        missing = [c for c in needed if c not in header]
        if missing:
            raise InputError(
                f"{source.name} has no {', '.join(missing)} column(s): it is not a cleaned file",
                hint="run geonorm clean on it first, and pass its output here",
            )
        run = cache.run_info(str(Path(path).resolve())) or {}
        column = column or run.get("column") or None
        if column is None:
            guesses = [h for h in header if fold(h) in _LOCATION_NAMES]
            column = guesses[0] if len(guesses) == 1 else None
        if column is None or column not in header:
            raise InputError(
                f"cannot tell which column of {source.name} holds the location text",
                hint=f"pass `column`, one of: {', '.join(h for h in header if h not in needed)}",
            )
        frame = read_columns(source, [column, *needed])
        grouped = frame.group_by([column, *needed]).len().rename({column: "__text"})
        return grouped, column, run.get("remote", "")
    finally:
        source.cleanup()


def _is_doubtful(row: dict[str, Any], prefix: str, below: float | None) -> bool:
    status, conf = row[prefix + "status"], float(row[prefix + "confidence"] or 0)
    return status in ("review", "unmatched") or (
        status == "matched" and below is not None and conf < below
    )


def _queue_line(key: str, rows: int, text: str, row: dict[str, Any], answer: Resolution, p: str):
    """One line of the queue: the file's guess, and the other candidates of the same answer."""
    guess = row[p + "country"] or ""
    conf = float(row[p + "confidence"] or 0) if guess else 0.0
    # Doubt: 1 − confidence for a guess; a world region is surely no single country (0.1).
    doubt = 0.1 if row[p + "reason"] == "world_region" else 1 - conf
    alts = [c for c in answer.candidates if c.country != guess][:3]
    return {
        "text": text,
        "rows": rows,
        "impact": round(rows * doubt, 2),
        "guess_country": guess,
        "guess_subdivision": row[p + "subdivision"] or "",
        "guess_city": row[p + "city"] or "",
        "confidence": f"{conf:.3f}" if guess else "",
        "reason": row[p + "reason"] or "",
        "alternatives": "; ".join(f"{c.label()} ({c.score:.2f})" for c in alts),
        **dict.fromkeys(DECISION_COLUMNS, ""),
        "__key": key,
    }


def _write_queue(out: str | Path, lines: list[dict[str, Any]]) -> None:
    try:
        with open(out, "w", encoding="utf-8", newline="") as fh:
            # Every cell quoted: a lone \r stays inside quotes.
            writer = csv.writer(fh, lineterminator="\n", quoting=csv.QUOTE_ALL)
            writer.writerow(QUEUE_COLUMNS)
            for d in lines:
                writer.writerow([neutralise(str(d[c])) for c in QUEUE_COLUMNS])
    except OSError as exc:
        raise InputError(
            f"cannot write {out} ({exc.strerror})", hint="check the folder exists and is writable"
        ) from exc


def export_queue(
    cleaned: str | Path,
    out: str | Path,
    *,
    column: str | None = None,
    below: float | None = None,
    top: int | None = None,
    prefix: str = "geo_",
    cache: Cache | None = None,
    resolver: Resolver | None = None,
) -> int:
    """Write the review queue of a cleaned file; returns the number of lines.

    The guess beside each text is the one in the cleaned file; its alternatives
    come from the same answer, read back from the cache through the answer
    pipeline (with the file's own prior, and the remote service its run used).
    """
    cache = cache or Cache()
    frame, column, remote = _read_cleaned(cleaned, column, prefix, cache)
    resolver = resolver or Resolver()
    counts: Counter[str] = Counter()
    texts: dict[str, Counter[str]] = {}
    first_row: dict[str, dict[str, Any]] = {}
    for row in frame.iter_rows(named=True):
        text = row["__text"] if row["__text"] is not None else ""
        key = resolver.key(text)
        counts[key] += row["len"]
        if _is_doubtful(row, prefix, below):
            texts.setdefault(key, Counter())[text] += row["len"]
            first_row.setdefault(key, row)
    answers = resolve_keys(counts, resolver=resolver, cache=cache, full=True, remote=remote or None)
    lines = [
        _queue_line(
            key,
            sum(texts[key].values()),
            texts[key].most_common(1)[0][0],
            row,
            answers.results[key],
            prefix,
        )
        for key, row in first_row.items()
    ]
    lines.sort(key=lambda d: (-d["impact"], -d["rows"], d["text"]))
    if top is not None:
        lines = lines[:top]
    _write_queue(out, lines)
    now = utc_stamp()
    cache.put_queue(
        [
            {"key": d["__key"], "text": d["text"], "exported_at": now, "file": str(out)}
            for d in lines
        ]
    )
    return len(lines)


@dataclass
class Problem:
    line: int
    message: str

    def __str__(self) -> str:
        return f"line {self.line}: {self.message}"


@dataclass
class ApplyReport:
    stored: int = 0
    new: int = 0
    changed: int = 0
    unchanged: int = 0
    skipped: int = 0  # lines without a decision
    problems: list[Problem] = field(default_factory=list)
    dry_run: bool = False


def _country(code: str) -> str | None:
    # A decision takes an alpha-2 or alpha-3 code; Kosovo only as XK, not XKX.
    return None if code.strip().upper() == "XKX" else codes.country(code)


def _check(row: dict, line: int, resolver: Resolver) -> tuple[dict | None, Problem | None]:
    raw_country = row["decision_country"].strip()
    sub = row["decision_subdivision"].strip().upper()
    city = row["decision_city"].strip()
    note = row["decision_note"].strip()
    decision = {
        "not_a_place": 0,
        "country": "",
        "subdivision": "",
        "city": "",
        "lat": None,
        "lon": None,
        "geonameid": None,
        "note": note,
    }
    if raw_country.lower().replace(" ", "_") == NOT_A_PLACE:
        if sub or city:
            return None, Problem(
                line, f"'{NOT_A_PLACE}' takes no subdivision or city; leave them empty"
            )
        decision["not_a_place"] = 1
        return decision, None
    if not raw_country:
        return None, Problem(
            line,
            "a subdivision or city was given without decision_country; "
            "fill in the ISO 3166-1 code (e.g. FR)",
        )
    country = _country(raw_country)
    if country is None:
        return None, Problem(
            line,
            f"'{raw_country}' is not an ISO 3166-1 country code; use a two-letter code "
            f"such as FR, or '{NOT_A_PLACE}'",
        )
    decision["country"] = country
    if sub:
        if codes.subdivision_country(sub) != country:
            return None, Problem(
                line,
                f"'{sub}' is not an ISO 3166-2 subdivision of {country}; "
                f"use a code such as {_example_sub(country)}",
            )
        decision["subdivision"] = sub
    if city:
        m = _COORDS.match(city)
        if m:
            lat, lon = float(m["lat"]), float(m["lon"])
            if not (-90 <= lat <= 90 and -180 <= lon <= 180):
                return None, Problem(
                    line,
                    f"coordinates ({lat}, {lon}) are out of range; write 'Name (lat, lon)' "
                    "with latitude -90..90 and longitude -180..180",
                )
            decision.update(city=m["name"].strip(), lat=lat, lon=lon)
        else:
            best = codes.find_city(resolver.index, country, city, sub, fallback=True)
            if best is None:
                return None, Problem(
                    line,
                    f"no city called '{city}' in {country} in the place index; check the "
                    "spelling, or give coordinates as 'Name (lat, lon)'",
                )
            decision.update(city=best.name, lat=best.lat, lon=best.lon, geonameid=best.gid)
            if not sub and best.sub:
                decision["subdivision"] = best.sub
    return decision, None


def _example_sub(country: str) -> str:
    subs = sorted(s.code for s in pycountry.subdivisions.get(country_code=country) or [])
    return subs[0] if subs else f"{country}-XX"


_DECISION_FIELDS = ("country", "subdivision", "city", "lat", "lon", "not_a_place", "note")


def _read_queue(path: Path) -> list[tuple[int, dict[str, str]]]:
    """The queue's rows with their line numbers, cells restored from their neutralised form."""
    if not path.exists():
        raise InputError(
            f"queue file {path} does not exist",
            hint="pass the CSV written by geonorm review export",
        )
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            reader = csv.DictReader(fh)
            missing = [c for c in ["text", *DECISION_COLUMNS] if c not in (reader.fieldnames or [])]
            if missing:
                raise InputError(
                    f"{path} has no {', '.join(missing)} column(s)",
                    hint="keep the columns of the exported queue; only fill in the decision_ ones",
                )
            rows = []
            start = reader.line_num + 1
            for row in reader:
                rows.append((start, {k: restore(v or "") for k, v in row.items() if k}))
                start = reader.line_num + 1
    except UnicodeDecodeError as exc:
        raise InputError(
            f"{path} is not UTF-8 text", hint="save the queue as 'CSV UTF-8' from your spreadsheet"
        ) from exc
    return rows


def _same_decision(stored: dict[str, Any] | None, decision: dict[str, Any]) -> bool:
    return stored is not None and all(
        stored[f] == decision[f] or (stored[f] in (None, "") and decision[f] in (None, ""))
        for f in _DECISION_FIELDS
    )


def check_items(
    items: list[dict[str, Any]], resolver: Resolver
) -> tuple[list[dict[str, Any]], list[Problem]]:
    """Decisions given as dicts (``text``, ``country``, ``subdivision``, ``city``, ``note``),
    checked as ``apply_decisions`` checks the lines of a queue; a problem's ``line`` is the
    item's index. Returns the valid decisions (with ``key`` and ``text``) and the problems."""
    decisions: list[dict[str, Any]] = []
    problems: list[Problem] = []
    for i, item in enumerate(items):
        row = {f"decision_{f}": str(item.get(f) or "") for f in ("country", "subdivision", "city")}
        row["decision_note"] = str(item.get("note") or "")
        text = str(item.get("text") or "")
        if not any(row[c].strip() for c in DECISION_COLUMNS[:3]):
            problems.append(
                Problem(i, f"no decision: give a country (ISO code) or '{NOT_A_PLACE}'")
            )
            continue
        decision, problem = _check(row, i, resolver)
        if problem or decision is None:
            problems.extend([problem] if problem else [])
            continue
        decisions.append({**decision, "key": resolver.key(text), "text": text})
    return decisions, problems


def apply_decisions(
    queue: str | Path,
    *,
    cache: Cache | None = None,
    resolver: Resolver | None = None,
    dry_run: bool = False,
) -> ApplyReport:
    """Validate a filled-in queue and store its valid decisions (one transaction)."""
    cache = cache or Cache()
    resolver = resolver or Resolver()
    report = ApplyReport(dry_run=dry_run)
    path = Path(queue)
    wanted: list[tuple[int, str, dict[str, Any]]] = []
    for line, row in _read_queue(path):
        if not any(row.get(c, "").strip() for c in DECISION_COLUMNS[:3]):
            report.skipped += 1
            continue
        decision, problem = _check(row, line, resolver)
        if problem or decision is None:
            report.problems.extend([problem] if problem else [])
            continue
        wanted.append((line, resolver.key(row["text"]), {**decision, "text": row["text"]}))
    queued = cache.queued({k for _, k, _ in wanted})
    existing = cache.overrides({k for _, k, _ in wanted})
    now = utc_stamp()
    to_store: dict[str, dict[str, Any]] = {}
    for line, key, decision in wanted:
        if key not in queued:
            report.problems.append(
                Problem(
                    line,
                    f"the text {decision['text']!r} is not in an exported queue; "
                    "do not edit the text column (export the queue again)",
                )
            )
            continue
        same = existing.get(key)
        if _same_decision(same, decision):
            report.unchanged += 1
            continue
        report.changed += bool(same)
        report.new += not same
        to_store[key] = {"key": key, **decision, "decided_at": now, "source": path.name}
    report.stored = len(to_store)
    if to_store and not dry_run:
        cache.put_overrides(list(to_store.values()))
    report.problems.sort(key=lambda p: p.line)
    return report


def undo(text: str, *, cache: Cache | None = None) -> str:
    """Remove the decision stored for ``text`` (any case or spacing variant); returns its key."""
    cache = cache or Cache()
    key = normalize_key(text)
    if not cache.delete_override(key):
        raise InputError(
            f"no decision is stored for {text!r}",
            hint="see the stored ones with: geonorm review list",
        )
    return key
