"""A run report to look at: one self-contained HTML page for a cleaning run.

The figures come from the run's summary (``CleanSummary``) and from the
cleaned file read back: the coverage funnel, statuses and reasons, a histogram
of confidences with the accept threshold marked, the top countries and a map,
the doubtful strings with the most rows, timings, versions and the caveats.
Charts are inline SVG drawn here; the page loads nothing from anywhere (a
Content-Security-Policy says so to the browser), and every piece of text that
comes from the data is escaped.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field
from html import escape
from pathlib import Path
from typing import TYPE_CHECKING, Any

import polars as pl

from ..batch.formats import open_source, read_columns, read_header
from ..clock import utc_stamp
from ..codes import country_name
from ..resolve.normalize import normalize_key
from .mapping import render_svg
from .population import bundled_population
from .tally import tally_file

if TYPE_CHECKING:
    from ..batch.clean import CleanSummary

__all__ = ["BINS", "DOUBTFUL", "TOP_COUNTRIES", "RowFigures", "read_rows", "report_html"]

STATUSES = ("matched", "review", "unmatched", "not_a_place")
STATUS_LABELS = {
    "matched": "matched",
    "review": "review",
    "unmatched": "unmatched",
    "not_a_place": "not a place",
}
# Our own status colours: a blue, an amber, a rust and a grey, far apart in lightness as well
# as hue, so that they stay apart for readers who lose one cone type.
STATUS_COLOURS = {
    "matched": "#2c6e9b",
    "review": "#e3a72f",
    "unmatched": "#a4472a",
    "not_a_place": "#a3a3a3",
}
INK, MUTED, RULE = "#1d1d1b", "#5b5b57", "#d9d9d2"
BINS = 20  # confidence histogram: bins of 0.05
DOUBTFUL = 20  # doubtful strings listed
TOP_COUNTRIES = 15
CHART_WIDTH = 1040


@dataclass
class Doubtful:
    text: str
    rows: int
    status: str
    country: str
    confidence: float
    reason: str
    spellings: int = 1


@dataclass
class RowFigures:
    """What the cleaned file says, row by row."""

    rows: int = 0
    empty: int = 0
    reasons: dict[str, Counter[str]] = field(default_factory=dict)  # reason → status → rows
    # Rows matched or in review with a country guess, by confidence.
    confidence: list[int] = field(default_factory=lambda: [0] * BINS)
    doubtful: list[Doubtful] = field(default_factory=list)
    countries: list[dict] = field(default_factory=list)  # tally rows, most rows first
    located: int = 0
    zeros: set[str] = field(default_factory=set)


def read_rows(output: str | Path, column: str, prefix: str = "geo_") -> RowFigures:
    """Read a cleaned file back for the report."""
    names = {f: prefix + f for f in ("country", "confidence", "reason", "status")}
    source = open_source(output)
    try:
        header = read_header(source)
        wanted = [c for c in (column, *names.values()) if c in header]
        frame = read_columns(source, wanted)
    finally:
        source.cleanup()
    status, reason, conf = names["status"], names["reason"], names["confidence"]
    figures = RowFigures(rows=frame.height)
    figures.empty = int((frame.get_column(reason) == "empty").sum())
    pairs = frame.group_by(reason, status).len()
    for r, s, n in pairs.iter_rows():
        figures.reasons.setdefault(r, Counter())[s] += n
    guessed = frame.filter(
        pl.col(status).is_in(["matched", "review"]) & (pl.col(names["country"]) != "")
    )
    values = guessed.get_column(conf).cast(pl.Float64, strict=False).drop_nulls()
    bins = (values * BINS).floor().cast(pl.Int64).clip(0, BINS - 1)
    for b, n in Counter(bins.to_list()).items():
        figures.confidence[b] = n
    if column in frame.columns:
        figures.doubtful = _doubtful(frame, column, names)
    tally = tally_file(output, prefix=prefix)
    figures.countries = tally.rows
    figures.located = tally.funnel.get("located", 0)
    population = bundled_population()
    present = {r["country"] for r in tally.rows}
    figures.zeros = {cc for cc in population.values if cc not in present}
    return figures


def _doubtful(frame: pl.DataFrame, column: str, names: dict[str, str]) -> list[Doubtful]:
    """The review and unmatched strings with the most rows, spellings that share a cache key
    counted together and shown by the commonest one (ties: alphabetical)."""
    per_text = (
        frame.filter(pl.col(names["status"]).is_in(["review", "unmatched"]))
        .group_by(column)
        .agg(pl.len().alias("rows"), *(pl.col(n).first().alias(f) for f, n in names.items()))
        .sort(["rows", column], descending=[True, False])
    )
    by_key: dict[str, Doubtful] = {}
    for row in per_text.iter_rows(named=True):
        key = normalize_key(row[column])
        seen = by_key.get(key)
        if seen is not None:
            seen.rows += row["rows"]
            seen.spellings += 1
            continue
        try:
            confidence = float(row["confidence"])
        except ValueError:
            confidence = 0.0
        by_key[key] = Doubtful(
            row[column], row["rows"], row["status"], row["country"], confidence, row["reason"]
        )
    ranked = sorted(by_key.values(), key=lambda d: (-d.rows, d.text))
    return ranked[:DOUBTFUL]


# --- Formatting -------------------------------------------------------------------------------


def _n(v: float) -> str:
    return f"{v:,}" if isinstance(v, int) else f"{v:,.2f}"


def _pct(part: float, whole: float) -> str:
    return f"{part / whole:.1%}" if whole else "–"


def _field(key: str, value: Any, shown: str | None = None) -> str:
    """A figure of the summary, tagged with where it sits in the JSON report."""
    text = shown if shown is not None else _n(value)
    return (
        f'<span data-field="{escape(key)}" data-value="{escape(str(value))}">{escape(text)}</span>'
    )


def _share(key: str, value: float) -> str:
    return _field(key, value, f"{value:.1%}")


def _svg(width: int, height: int, body: list[str], label: str) -> str:
    return (
        f'<svg class="chart" viewBox="0 0 {width} {height}" width="{width}" height="{height}" '
        f'role="img" aria-label="{escape(label)}" font-size="13">{"".join(body)}</svg>'
    )


def _text(x: float, y: float, text: str, **attrs: str) -> str:
    extra = "".join(f' {k.replace("_", "-")}="{escape(v)}"' for k, v in attrs.items())
    return f'<text x="{x:.1f}" y="{y:.1f}"{extra}>{escape(text)}</text>'


def _rect(x: float, y: float, w: float, h: float, fill: str, tip: str = "") -> str:
    title = f"<title>{escape(tip)}</title>" if tip else ""
    return (
        f'<rect x="{x:.1f}" y="{y:.1f}" width="{max(w, 0):.1f}" height="{h:.1f}" '
        f'fill="{fill}">{title}</rect>'
    )


def _clip(text: str, chars: int) -> str:
    return text if len(text) <= chars else text[: chars - 1] + "…"


# --- Charts -----------------------------------------------------------------------------------


def _funnel(summary: CleanSummary, rows: RowFigures | None) -> str:
    total, status = summary.rows, summary.status
    not_a_place = status.get("not_a_place", 0)
    steps: list[tuple[str, int, str]] = [("All rows", total, "")]
    if rows is not None:
        steps.append(("With text", total - rows.empty, f"{rows.empty:,} empty"))
        not_a_place -= rows.empty
    steps += [
        ("Look like a place", steps[-1][1] - not_a_place, f"{not_a_place:,} not a place"),
        (
            "With a best guess",
            status.get("matched", 0) + status.get("review", 0),
            f"{status.get('unmatched', 0):,} unmatched",
        ),
        ("Matched (located)", status.get("matched", 0), f"{status.get('review', 0):,} in review"),
    ]
    label_w, bar_w, row_h = 170, 560, 34
    body = []
    for i, (label, n, dropped) in enumerate(steps):
        y = 8 + i * row_h
        w = bar_w * n / total if total else 0
        colour = STATUS_COLOURS["matched"] if i == len(steps) - 1 else "#8aa6ba"
        body.append(_text(0, y + 17, label, fill=INK))
        body.append(_rect(label_w, y, w, 24, colour, f"{label}: {n:,} rows"))
        body.append(_text(label_w + w + 8, y + 17, f"{n:,}  ({_pct(n, total)})", fill=INK))
        if dropped:
            body.append(_text(label_w + bar_w + 150, y + 17, f"− {dropped}", fill=MUTED))
    return _svg(CHART_WIDTH, 8 + len(steps) * row_h, body, "Coverage funnel")


def _status_bar(summary: CleanSummary) -> str:
    total = summary.rows or 1
    x, body = 0.0, []
    for s in STATUSES:
        n = summary.status.get(s, 0)
        w = CHART_WIDTH * n / total
        body.append(_rect(x, 0, w, 30, STATUS_COLOURS[s], f"{STATUS_LABELS[s]}: {n:,} rows"))
        x += w
    return _svg(CHART_WIDTH, 30, body, "Rows by status")


def _legend() -> str:
    items = "".join(
        f'<span class="key"><i style="background:{STATUS_COLOURS[s]}"></i>'
        f"{escape(STATUS_LABELS[s])}</span>"
        for s in STATUSES
    )
    return f'<p class="legend">{items}</p>'


def _reasons(rows: RowFigures) -> str:
    order = sorted(rows.reasons.items(), key=lambda kv: (-sum(kv[1].values()), kv[0]))
    most = max((sum(c.values()) for _, c in order), default=1) or 1
    label_w, bar_w, row_h = 170, 700, 24
    body = []
    for i, (reason, by_status) in enumerate(order):
        y = 4 + i * row_h
        body.append(_text(0, y + 14, _clip(reason, 24), fill=INK))
        x = float(label_w)
        for s in STATUSES:
            n = by_status.get(s, 0)
            if n:
                w = bar_w * n / most
                body.append(_rect(x, y, w, 18, STATUS_COLOURS[s], f"{reason}, {s}: {n:,} rows"))
                x += w
        total = sum(by_status.values())
        body.append(_text(x + 8, y + 14, f"{total:,}", fill=INK))
    return _svg(CHART_WIDTH, 8 + len(order) * row_h, body, "Rows by reason and status")


def _nice_step(top: float) -> int:
    raw = max(top / 4, 1)
    mag = 10 ** math.floor(math.log10(raw))
    return int(next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw))


def _histogram(bins: list[int], accept: float) -> str:
    left, bottom, plot_w, plot_h = 70, 40, 940, 230
    height = plot_h + bottom + 30
    ranked = sorted(bins, reverse=True)
    top = ranked[0] or 1
    clipped = ranked[1] > 0 and top > 4 * ranked[1]
    ymax = ranked[1] * 1.5 if clipped else top * 1.05
    step = _nice_step(ymax)
    y0 = 20 + plot_h
    body = []
    for k in range(0, int(ymax) + 1, step):
        y = y0 - plot_h * k / ymax
        body.append(
            f'<line x1="{left}" x2="{left + plot_w}" y1="{y:.1f}" y2="{y:.1f}" stroke="{RULE}"/>'
        )
        body.append(_text(left - 8, y + 4, f"{k:,}", fill=MUTED, text_anchor="end"))
    bw = plot_w / len(bins)
    for i, n in enumerate(bins):
        lo, hi = i / len(bins), (i + 1) / len(bins)
        colour = STATUS_COLOURS["matched" if (lo + hi) / 2 >= accept else "review"]
        h = plot_h * min(n, ymax) / ymax
        x = left + i * bw
        body.append(_rect(x + 1, y0 - h, bw - 2, h, colour, f"{lo:.2f}–{hi:.2f}: {n:,} rows"))
        if n > ymax:  # cut bar: a gap across it, and its count on top
            body.append(_rect(x - 1, y0 - h + 18, bw + 2, 6, "#ffffff"))
            body.append(_text(x + bw / 2, y0 - h - 6, f"{n:,}", fill=INK, text_anchor="middle"))
    for i in range(0, len(bins) + 1, 2):
        x = left + i * bw
        body.append(_text(x, y0 + 18, f"{i / len(bins):.1f}", fill=MUTED, text_anchor="middle"))
    ax = left + plot_w * accept
    body.append(
        f'<line x1="{ax:.1f}" x2="{ax:.1f}" y1="12" y2="{y0 + 4}" stroke="{INK}" '
        'stroke-width="2" stroke-dasharray="6 4"/>'
    )
    anchor = "end" if accept > 0.8 else "start"
    dx = -6 if anchor == "end" else 6
    body.append(_text(ax + dx, 14, f"accept ≥ {accept:g}", fill=INK, text_anchor=anchor))
    body.append(
        _text(left + plot_w / 2, height - 4, "confidence", fill=MUTED, text_anchor="middle")
    )
    return _svg(CHART_WIDTH, height, body, "Confidence histogram")


def _map(rows: RowFigures) -> str:
    values: dict[str, float] = {}
    names = {cc: country_name(cc) for cc in rows.zeros}
    for r in rows.countries:
        names[r["country"]] = r["name"] or r["country"]
        if r["shrunk_per_million"] != "":
            values[r["country"]] = float(r["shrunk_per_million"])
    if not values:
        return '<p class="muted">No located row has a country with a known population.</p>'
    svg = render_svg(
        values,
        title="Located rows per million people (shrunk)",
        unit="per million people",
        names=names,
        zeros=rows.zeros,
        note=(
            f"{len(values)} countries with located rows, {len(rows.zeros)} with a population and "
            "none located. Population: World Bank (pypopulation), gaps from GeoNames."
        ),
    )
    return f'<div class="map">{svg}</div>'


# --- Sections ---------------------------------------------------------------------------------


def _key_figures(summary: CleanSummary) -> str:
    shares = summary.to_dict()["status_share"]
    items = [
        ("rows", _field("rows", summary.rows)),
        ("matched", _share("status_share.matched", shares.get("matched", 0.0))),
        ("in review", _share("status_share.review", shares.get("review", 0.0))),
        ("distinct strings", _field("distinct", summary.distinct)),
        ("seconds", _field("seconds", summary.seconds, f"{summary.seconds:,.2f}")),
    ]
    cells = "".join(f'<div class="figure"><b>{v}</b>{escape(k)}</div>' for k, v in items)
    return f'<div class="figures">{cells}</div>'


def _status_table(summary: CleanSummary) -> str:
    shares = summary.to_dict()["status_share"]
    body = "".join(
        f'<tr><td><span class="key"><i style="background:{STATUS_COLOURS.get(s, MUTED)}"></i>'
        f"{escape(STATUS_LABELS.get(s, s))}</span></td>"
        f'<td class="n">{_field(f"status.{s}", n)}</td>'
        f'<td class="n">{_share(f"status_share.{s}", shares.get(s, 0.0))}</td></tr>'
        for s, n in summary.status.items()
    )
    return (
        '<table class="narrow"><thead><tr><th>status</th><th class="n">rows</th>'
        f'<th class="n">share</th></tr></thead><tbody>{body}</tbody></table>'
    )


def _rate(v: float) -> str:
    """A rate with enough digits to tell small ones apart (0.072, 3.6, 1,250)."""
    if v >= 100:
        return f"{v:,.0f}"
    return f"{v:.1f}" if v >= 1 else f"{v:.2g}"


def _countries_table(rows: RowFigures) -> str:
    top = rows.countries[:TOP_COUNTRIES]
    if not top:
        return '<p class="muted">No row was located.</p>'
    most = top[0]["count"] or 1
    body = []
    for r in top:
        rate = r["shrunk_per_million"]
        body.append(
            f'<tr><td>{escape(r["name"] or r["country"])} <span class="muted">'
            f"{escape(r['country'])}</span></td>"
            f'<td class="n">{r["count"]:,}</td>'
            f'<td class="bar"><i style="width:{100 * r["count"] / most:.1f}%"></i></td>'
            f'<td class="n">{float(r["share"]):.1%}</td>'
            f'<td class="n">{"–" if rate == "" else _rate(float(rate))}</td></tr>'
        )
    return (
        '<table><thead><tr><th>country</th><th class="n">rows</th><th></th>'
        '<th class="n">share of located</th><th class="n">per million (shrunk)</th></tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table>"
    )


def _others(spellings: int) -> str:
    if spellings <= 1:
        return ""
    other = "spelling" if spellings == 2 else "spellings"
    return f' <span class="muted">and {spellings - 1} other {other}</span>'


def _doubtful_table(rows: RowFigures) -> str:
    if not rows.doubtful:
        return '<p class="muted">No string was left in review or unmatched.</p>'
    body = []
    for i, d in enumerate(rows.doubtful, start=1):
        guess = f"{country_name(d.country)} ({d.country})" if d.country else "–"
        body.append(
            f'<tr><td class="n">{i}</td><td class="text">{escape(d.text) or "<i>(empty)</i>"}'
            f"{_others(d.spellings)}</td>"
            f'<td class="n">{d.rows:,}</td><td>{escape(STATUS_LABELS.get(d.status, d.status))}</td>'
            f'<td>{escape(guess)}</td><td class="n">{d.confidence:.2f}</td>'
            f"<td>{escape(d.reason)}</td></tr>"
        )
    return (
        '<table><thead><tr><th class="n">#</th><th>as typed</th><th class="n">rows</th>'
        '<th>status</th><th>best guess</th><th class="n">confidence</th><th>reason</th></tr>'
        f"</thead><tbody>{''.join(body)}</tbody></table>"
    )


_RUN_LABELS = {
    "rows": "rows read",
    "distinct": "distinct strings",
    "cache_hits": "answered from the cache",
    "resolved": "resolved in this run",
    "decided": "decided by people (review)",
    "bad_lines": "rows set aside (wrong number of fields)",
    "seconds": "seconds, start to end",
}


def _run_table(summary: CleanSummary) -> str:
    d = summary.to_dict()
    scalars = {
        k: v for k, v in d.items() if isinstance(v, (int, float)) and not isinstance(v, bool)
    }
    body = [
        f"<tr><td>{escape(_RUN_LABELS.get(k, k.replace('_', ' ')))}</td>"
        f'<td class="n">{_field(k, v)}</td></tr>'
        for k, v in scalars.items()
    ]
    if summary.seconds:
        body.append(
            "<tr><td>rows per second</td>"
            f'<td class="n">{summary.rows / summary.seconds:,.0f}</td></tr>'
        )
    for k, v in (summary.remote or {}).items():
        if isinstance(v, (int, float, str)) and not isinstance(v, bool):
            shown = _field(f"remote.{k}", v, v if isinstance(v, str) else None)
            body.append(
                f'<tr><td>remote: {escape(k.replace("_", " "))}</td><td class="n">{shown}</td></tr>'
            )
    return f'<table class="narrow"><tbody>{"".join(body)}</tbody></table>'


def _versions_table(summary: CleanSummary) -> str:
    body = "".join(
        f"<tr><td>{escape(k)}</td><td>{_field(f'versions.{k}', v, str(v))}</td></tr>"
        for k, v in summary.versions.items()
    )
    return f'<table class="narrow"><tbody>{body}</tbody></table>'


_CAVEATS = """
<ul>
<li><b>Self-reported, self-selected.</b> The locations are what people chose to type, and the
people are those who chose to join and to answer. Counts describe them, not a country's
population; rates compare countries only as far as people everywhere are equally likely to join
and to give a usable location.</li>
<li><b>Confidence is an estimate.</b> It is calibrated on labelled data: of answers given 0.9,
about 90% are right there. Rows in review are best guesses below the accept threshold and are
not counted as located.</li>
<li><b>Personal data.</b> This page quotes strings people typed (the doubtful strings above),
which may identify someone. Keep it where the data itself is kept, and do not publish it.</li>
</ul>
"""

_STYLE = """
body{margin:0;background:#f6f5f0;color:#1d1d1b;font:15px/1.45 system-ui,sans-serif}
main{max-width:1100px;margin:0 auto;padding:28px 30px 48px}
h1{font-size:26px;margin:0 0 2px}
h2{font-size:18px;margin:0 0 12px}
h3{font-size:15px;margin:18px 0 8px}
p{margin:6px 0}
.muted,.sub{color:#5b5b57}
section{background:#fff;border:1px solid #e0dfd8;border-radius:6px;padding:18px 22px;margin:18px 0}
.figures{display:grid;grid-template-columns:repeat(5,1fr);gap:12px;margin-top:18px}
.figure{background:#fff;border:1px solid #e0dfd8;border-radius:6px;padding:10px 14px;color:#5b5b57}
.figure b{display:block;font-size:26px;color:#1d1d1b;font-variant-numeric:tabular-nums}
table{border-collapse:collapse;width:100%;font-variant-numeric:tabular-nums}
table.narrow{width:auto;min-width:420px}
th,td{padding:4px 10px;border-bottom:1px solid #ecebe5;text-align:left;vertical-align:top}
th{font-weight:600;color:#5b5b57;font-size:13px}
.n{text-align:right;white-space:nowrap}
td.text{word-break:break-word;max-width:420px;font-family:ui-monospace,monospace;font-size:14px}
td.text .muted{font-family:system-ui,sans-serif;font-size:13px}
td.bar{width:30%}
td.bar i{display:block;height:14px;margin-top:3px;background:#2c6e9b}
svg.chart{display:block;max-width:100%;height:auto;overflow:visible}
svg.chart text{font-family:system-ui,sans-serif}
.map svg{display:block;width:100%;height:auto;margin-top:8px}
.legend{margin:8px 0 0}
.key{display:inline-flex;align-items:center;margin-right:18px;white-space:nowrap}
.key i{display:inline-block;width:14px;height:14px;margin-right:6px;border-radius:2px}
.two{display:grid;grid-template-columns:1fr 1fr;gap:24px}
footer{color:#5b5b57;font-size:13px;margin-top:24px}
"""


def report_html(
    summary: CleanSummary,
    *,
    source: str,
    column: str,
    accept: float,
    prefix: str = "geo_",
) -> str:
    """The run report page for ``summary`` (reads the cleaned file back when there is one)."""
    source = "standard input" if source == "-" else source
    rows = None
    if summary.output and summary.output != "-" and Path(summary.output).exists():
        rows = read_rows(summary.output, column, prefix)
    missing = (
        '<p class="muted">The cleaned rows went to standard output, so the parts drawn from '
        "them are not shown.</p>"
    )
    sections = [
        ("Coverage", _funnel(summary, rows)),
        (
            "Status and reason",
            f'{_status_bar(summary)}{_legend()}<div class="two"><div><h3>Rows by status</h3>'
            f"{_status_table(summary)}</div><div><h3>Accept threshold</h3><p>A best guess is "
            f"<b>matched</b> when its confidence is at least {accept:g}; below that it goes to "
            "<b>review</b>.</p></div></div>"
            + (f"<h3>Rows by reason</h3>{_reasons(rows)}" if rows else missing),
        ),
        (
            "Confidence of the best guesses",
            (
                '<p class="muted">Rows matched or in review with a country guess '
                f"({sum(rows.confidence):,}), by the confidence of that guess; the dashed line "
                "is the accept threshold.</p>"
                f"{_histogram(rows.confidence, accept)}"
                if rows
                else missing
            ),
        ),
        (
            "Countries",
            (
                f'<p class="muted">{rows.located:,} located rows (matched) in '
                f"{len(rows.countries):,} countries; the {min(TOP_COUNTRIES, len(rows.countries))} "
                f"with the most rows.</p>{_countries_table(rows)}{_map(rows)}"
                if rows
                else missing
            ),
        ),
        (
            "Doubtful strings with the most rows",
            (
                f'<p class="muted">Up to {DOUBTFUL} strings in review or unmatched, as typed, '
                "most rows first: the first ones to look at (<code>geonorm review export</code>)."
                "</p>"
                f"{_doubtful_table(rows)}"
                if rows
                else missing
            ),
        ),
        (
            "Run",
            f'<div class="two"><div><h3>Counts and timings</h3>{_run_table(summary)}</div>'
            f"<div><h3>Versions</h3>{_versions_table(summary)}</div></div>",
        ),
        ("Read with care", _CAVEATS),
    ]
    body = "".join(
        f'<section id="s{i}"><h2>{escape(title)}</h2>{html}</section>'
        for i, (title, html) in enumerate(sections, start=1)
    )
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">\n'
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        "style-src 'unsafe-inline'; img-src data:\">\n"
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>geonorm run report: {escape(Path(source).name)}</title>\n"
        f"<style>{_STYLE}</style></head>\n<body><main>\n"
        f'<h1>Run report</h1>\n<p class="sub">{escape(source)} → '
        f"{escape(summary.output)}, column <b>{escape(column)}</b>, accept ≥ {accept:g}</p>\n"
        f"{_key_figures(summary)}\n{body}\n"
        f"<footer>Made by geonorm {escape(summary.versions.get('geonorm', ''))} at "
        f"{utc_stamp()}. Nothing on this page is loaded from elsewhere.</footer>\n"
        "</main></body></html>\n"
    )
